namespace FedGrid.Charts;

/// <summary>An 8-bit RGB canvas with anti-aliased strokes and discs and the built-in font.</summary>
internal sealed class RgbCanvas
{
    private readonly float[] _coverage;
    private readonly int _width, _height;

    public RgbCanvas(int width, int height)
    {
        _width = width; _height = height;
        Pixels = new byte[width * height * 3];
        _coverage = new float[width * height];
    }

    public byte[] Pixels { get; }

    public void FillRect(double x, double y, double w, double h, ChartColor c)
    {
        int x0 = Math.Max(0, (int)Math.Round(x)), y0 = Math.Max(0, (int)Math.Round(y));
        int x1 = Math.Min(_width, (int)Math.Round(x + w)), y1 = Math.Min(_height, (int)Math.Round(y + h));
        for (int py = y0; py < y1; py++)
            for (int px = x0; px < x1; px++) Blend(py * _width + px, c, 1f);
    }

    /// <summary>Strokes a polyline of the given width with round joins and caps. Coverage is
    /// collected per pixel as a maximum first, so joins are not painted twice.</summary>
    public void StrokePolyline(ReadOnlySpan<double> pts, ChartColor c, double width, bool dashed, Clip clip)
    {
        double half = width / 2;
        var box = Clip.Empty;
        if (!dashed)
        {
            if (pts.Length == 2) CoverSegment(pts[0], pts[1], pts[0], pts[1], half, clip, ref box);
            for (int i = 2; i + 1 < pts.Length; i += 2) CoverSegment(pts[i - 2], pts[i - 1], pts[i], pts[i + 1], half, clip, ref box);
        }
        else
        {
            double on = 4 * width, off = 2.5 * width, phase = 0; // dash pattern along the whole path
            for (int i = 2; i + 1 < pts.Length; i += 2)
            {
                double ax = pts[i - 2], ay = pts[i - 1], dx = pts[i] - ax, dy = pts[i + 1] - ay, len = Math.Sqrt(dx * dx + dy * dy);
                for (double t = 0; t < len;)
                {
                    double inPattern = phase % (on + off);
                    double run = inPattern < on ? on - inPattern : on + off - inPattern;
                    double t1 = Math.Min(len, t + run);
                    if (inPattern < on) CoverSegment(ax + dx * t / len, ay + dy * t / len, ax + dx * t1 / len, ay + dy * t1 / len, half, clip, ref box);
                    phase += t1 - t; t = t1;
                }
            }
        }
        Flush(box, c);
    }

    public void FillDisc(double cx, double cy, double r, ChartColor c, Clip clip)
    {
        var box = Clip.Empty;
        CoverSegment(cx, cy, cx, cy, r, clip, ref box);
        Flush(box, c);
    }

    /// <summary>Draws text with its top-left corner at (x, y); vertical text is turned a quarter left and reads upwards.</summary>
    public void DrawText(string text, int x, int y, int scale, ChartColor c, bool vertical)
    {
        int length = (BitmapFont.Advance * text.Length - 1) * scale;
        for (int i = 0; i < text.Length; i++)
            for (int col = 0; col < BitmapFont.GlyphWidth; col++)
                for (int row = 0; row < BitmapFont.Rows; row++)
                {
                    if (!BitmapFont.Dot(text[i], col, row)) continue;
                    int u = (i * BitmapFont.Advance + col) * scale, v = row * scale;
                    if (vertical) FillRect(x + v, y + length - u - scale, scale, scale, c);
                    else FillRect(x + u, y + v, scale, scale, c);
                }
    }

    private void CoverSegment(double ax, double ay, double bx, double by, double half, Clip clip, ref Clip box)
    {
        double reach = half + 1;
        int x0 = (int)Math.Max(clip.X0, Math.Floor(Math.Min(ax, bx) - reach)), x1 = (int)Math.Min(clip.X1, Math.Ceiling(Math.Max(ax, bx) + reach));
        int y0 = (int)Math.Max(clip.Y0, Math.Floor(Math.Min(ay, by) - reach)), y1 = (int)Math.Min(clip.Y1, Math.Ceiling(Math.Max(ay, by) + reach));
        x0 = Math.Max(x0, 0); y0 = Math.Max(y0, 0); x1 = Math.Min(x1, _width); y1 = Math.Min(y1, _height);
        if (x0 >= x1 || y0 >= y1) return;
        box = new Clip(Math.Min(box.X0, x0), Math.Min(box.Y0, y0), Math.Max(box.X1, x1), Math.Max(box.Y1, y1));
        double dx = bx - ax, dy = by - ay, len2 = dx * dx + dy * dy;
        for (int py = y0; py < y1; py++)
            for (int px = x0; px < x1; px++)
            {
                double qx = px + 0.5 - ax, qy = py + 0.5 - ay;
                double t = len2 > 0 ? Math.Clamp((qx * dx + qy * dy) / len2, 0, 1) : 0;
                double ex = qx - t * dx, ey = qy - t * dy;
                float cover = (float)Math.Clamp(half + 0.5 - Math.Sqrt(ex * ex + ey * ey), 0, 1);
                ref float slot = ref _coverage[py * _width + px];
                if (cover > slot) slot = cover;
            }
    }

    private void Flush(Clip box, ChartColor c)
    {
        for (int py = box.Y0; py < box.Y1; py++)
            for (int px = box.X0; px < box.X1; px++)
            {
                ref float slot = ref _coverage[py * _width + px];
                if (slot > 0) { Blend(py * _width + px, c, slot); slot = 0; }
            }
    }

    private void Blend(int pixel, ChartColor c, float a)
    {
        int o = pixel * 3;
        if (a >= 1f) { Pixels[o] = c.R; Pixels[o + 1] = c.G; Pixels[o + 2] = c.B; return; }
        Pixels[o] = (byte)Math.Round(Pixels[o] + (c.R - Pixels[o]) * a);
        Pixels[o + 1] = (byte)Math.Round(Pixels[o + 1] + (c.G - Pixels[o + 1]) * a);
        Pixels[o + 2] = (byte)Math.Round(Pixels[o + 2] + (c.B - Pixels[o + 2]) * a);
    }
}

/// <summary>A pixel rectangle [X0, X1) x [Y0, Y1).</summary>
internal readonly record struct Clip(int X0, int Y0, int X1, int Y1)
{
    public static readonly Clip Empty = new(int.MaxValue, int.MaxValue, int.MinValue, int.MinValue);
}
