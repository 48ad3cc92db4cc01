namespace FedGrid.Charts;

/// <summary>
/// Where everything of a chart goes on a canvas of a given size, in pixels (origin top left,
/// y down). Both renderers draw from the same layout, so a PNG and an SVG of one chart match.
/// </summary>
public sealed class ChartLayout
{
    /// <summary>Smallest canvas width the layout accepts.</summary>
    public const int MinWidth = 160;
    /// <summary>Smallest canvas height the layout accepts.</summary>
    public const int MinHeight = 120;

    internal static readonly ChartColor Background = new(0xFF, 0xFF, 0xFF);
    internal static readonly ChartColor TextColor = new(0x20, 0x20, 0x20);
    internal static readonly ChartColor AxisColor = new(0x40, 0x40, 0x40);
    internal static readonly ChartColor GridColor = new(0xE3, 0xE3, 0xE3);

    private ChartLayout(int width, int height, int scale) { Width = width; Height = height; TextScale = scale; }

    /// <summary>Canvas width.</summary>
    public int Width { get; }
    /// <summary>Canvas height.</summary>
    public int Height { get; }
    /// <summary>Size of one font pixel in canvas pixels (glyphs are 5 x 7 font pixels).</summary>
    public int TextScale { get; }
    /// <summary>Left edge of the plot area.</summary>
    public double PlotLeft { get; private set; }
    /// <summary>Top edge of the plot area.</summary>
    public double PlotTop { get; private set; }
    /// <summary>Right edge of the plot area.</summary>
    public double PlotRight { get; private set; }
    /// <summary>Bottom edge of the plot area.</summary>
    public double PlotBottom { get; private set; }
    /// <summary>X-axis ticks; their Min and Max are the ends of the axis.</summary>
    public AxisTicks XTicks { get; private set; } = null!;
    /// <summary>Y-axis ticks; their Min and Max are the ends of the axis.</summary>
    public AxisTicks YTicks { get; private set; } = null!;

    /// <summary>Canvas x of data value <paramref name="x"/>.</summary>
    /// <param name="x">Data x.</param>
    public double MapX(double x) => PlotLeft + (x - XTicks.Min) / (XTicks.Max - XTicks.Min) * (PlotRight - PlotLeft);

    /// <summary>Canvas y of data value <paramref name="y"/>.</summary>
    /// <param name="y">Data y.</param>
    public double MapY(double y) => PlotBottom - (y - YTicks.Min) / (YTicks.Max - YTicks.Min) * (PlotBottom - PlotTop);

    internal int Legend { get; private set; }

    /// <summary>Lays out <paramref name="chart"/> on a <paramref name="width"/> x <paramref name="height"/> canvas.</summary>
    /// <param name="chart">The chart.</param>
    /// <param name="width">Canvas width in pixels, at least <see cref="MinWidth"/>.</param>
    /// <param name="height">Canvas height in pixels, at least <see cref="MinHeight"/>.</param>
    public static ChartLayout Compute(Chart chart, int width, int height)
    {
        ArgumentNullException.ThrowIfNull(chart);
        if (width < MinWidth || width > 16384) throw new ArgumentOutOfRangeException(nameof(width), width, $"chart width must be {MinWidth}..16384 pixels");
        if (height < MinHeight || height > 16384) throw new ArgumentOutOfRangeException(nameof(height), height, $"chart height must be {MinHeight}..16384 pixels");
        int s = Math.Max(1, (int)Math.Round(Math.Min(width, height * 1.6) / 500.0));
        var l = new ChartLayout(width, height, s);
        int pad = 8 * s, glyphH = 7 * s, tick = 4 * s;

        var (xr, yr) = DataRanges(chart);
        double top = pad + (chart.Title.Length > 0 ? glyphH + pad : 0);
        double bottom = height - pad - (chart.XLabel.Length > 0 ? glyphH + 6 * s : 0) - glyphH - 3 * s - tick;
        l.YTicks = Ticks(yr, chart.YRange, Math.Clamp((int)((bottom - top) / (26 * s)), 3, 12));

        int yLabelW = l.YTicks.Values.Max(v => l.TextWidth(l.YTicks.Format(v)));
        double left = pad + (chart.YLabel.Length > 0 ? glyphH + 6 * s : 0) + yLabelW + 3 * s + tick;
        int legendW = 0;
        foreach (var e in chart.Series) legendW = Math.Max(legendW, l.TextWidth(e.Name));
        foreach (var e in chart.ReferenceLines) legendW = Math.Max(legendW, l.TextWidth(e.Label));
        legendW = Math.Min(legendW, width * 3 / 10);
        l.Legend = legendW;
        double right = width - pad - (legendW > 0 ? 22 * s + legendW + pad : pad);
        if (right - left < 40 || bottom - top < 30) throw new ArgumentOutOfRangeException(nameof(width), $"a {width} x {height} canvas leaves no room for the plot of '{chart.Title}'");

        int target = Math.Clamp((int)((right - left) / (36 * s)), 2, 16);
        while (true)
        {
            l.XTicks = Ticks(xr, chart.XRange, target);
            int widest = l.XTicks.Values.Max(v => l.TextWidth(l.XTicks.Format(v)));
            double px = l.XTicks.Step / (l.XTicks.Max - l.XTicks.Min) * (right - left);
            if (px >= widest + 6 * s || target == 2) break;
            target--;
        }
        l.PlotLeft = left; l.PlotTop = top; l.PlotRight = right; l.PlotBottom = bottom;
        return l;
    }

    /// <summary>Width in canvas pixels of <paramref name="text"/> in the built-in font.</summary>
    /// <param name="text">Text.</param>
    public int TextWidth(string text) => text.Length == 0 ? 0 : (6 * text.Length - 1) * TextScale;

    private static AxisTicks Ticks((double Min, double Max) data, AxisRange? fixedRange, int target)
    {
        if (fixedRange is { } r)
        {
            if (!double.IsFinite(r.Min) || !double.IsFinite(r.Max) || !(r.Max > r.Min))
                throw new ArgumentException($"axis range [{r.Min}, {r.Max}] must be finite with Min < Max");
            return AxisTicks.Fixed(r.Min, r.Max, target);
        }
        return AxisTicks.Nice(data.Min, data.Max, target);
    }

    private static ((double, double) X, (double, double) Y) DataRanges(Chart chart)
    {
        double x0 = double.PositiveInfinity, x1 = double.NegativeInfinity, y0 = x0, y1 = x1;
        foreach (var series in chart.Series)
        {
            var xs = series.Xs.Span; var ys = series.Ys.Span;
            for (int i = 0; i < xs.Length; i++)
            {
                if (!double.IsFinite(xs[i]) || !double.IsFinite(ys[i])) continue;
                x0 = Math.Min(x0, xs[i]); x1 = Math.Max(x1, xs[i]);
                y0 = Math.Min(y0, ys[i]); y1 = Math.Max(y1, ys[i]);
            }
        }
        foreach (var line in chart.ReferenceLines)
            if (double.IsFinite(line.Y)) { y0 = Math.Min(y0, line.Y); y1 = Math.Max(y1, line.Y); }
        if (x0 > x1) (x0, x1) = (0, 1);
        if (y0 > y1) (y0, y1) = (0, 1);
        return ((x0, x1), (y0, y1));
    }
}
