namespace FedGrid.Charts;

/// <summary>Renders charts to PNG files with the built-in rasteriser and font; no native code.</summary>
public static class PngChartRenderer
{
    /// <summary>Renders <paramref name="chart"/> as an RGB PNG of <paramref name="width"/> x <paramref name="height"/> pixels.</summary>
    /// <param name="chart">The chart.</param>
    /// <param name="width">Width in pixels (at least <see cref="ChartLayout.MinWidth"/>).</param>
    /// <param name="height">Height in pixels (at least <see cref="ChartLayout.MinHeight"/>).</param>
    /// <returns>The bytes of a PNG file.</returns>
    public static byte[] Render(Chart chart, int width = 800, int height = 480)
    {
        var layout = ChartLayout.Compute(chart, width, height);
        var canvas = new RgbCanvas(width, height);
        var whole = new Clip(0, 0, width, height);
        var plot = new Clip((int)Math.Floor(layout.PlotLeft), (int)Math.Floor(layout.PlotTop), (int)Math.Ceiling(layout.PlotRight) + 1, (int)Math.Ceiling(layout.PlotBottom) + 1);
        foreach (var shape in ChartScene.Build(chart, layout)) Draw(canvas, shape, layout.TextScale, whole, plot);
        return PngEncoder.Encode(canvas.Pixels, width, height);
    }

    private static void Draw(RgbCanvas canvas, Shape shape, int scale, Clip whole, Clip plot)
    {
        switch (shape)
        {
            case RectShape r: canvas.FillRect(r.X, r.Y, r.W, r.H, r.Fill); break;
            case PathShape p: canvas.StrokePolyline(p.Points, p.Color, p.Width, p.Dashed, p.Clip ? plot : whole); break;
            case MarkerShape m: canvas.FillDisc(m.X, m.Y, m.Radius, m.Color, m.Clip ? plot : whole); break;
            case TextShape t:
                int length = (BitmapFont.Advance * t.Text.Length - 1) * scale;
                if (t.Vertical) canvas.DrawText(t.Text, (int)Math.Round(t.X), (int)Math.Round(t.Top - length / 2.0), scale, t.Color, true);
                else
                {
                    double left = t.Align switch { TextAlign.Center => t.X - length / 2.0, TextAlign.Right => t.X - length, _ => t.X };
                    canvas.DrawText(t.Text, (int)Math.Round(left), (int)Math.Round(t.Top), scale, t.Color, false);
                }
                break;
            case GroupShape g:
                foreach (var item in g.Items) Draw(canvas, item, scale, whole, plot);
                break;
        }
    }
}
