namespace FedGrid.Charts;

/// <summary>How a series is drawn.</summary>
public enum SeriesKind
{
    /// <summary>Straight segments between consecutive points.</summary>
    Line,
    /// <summary>One filled round marker per point.</summary>
    Scatter,
    /// <summary>A staircase: the value holds until the next x, then jumps (e.g. a 15-minute setpoint).</summary>
    Step,
}

/// <summary>An opaque sRGB colour.</summary>
/// <param name="R">Red, 0-255.</param>
/// <param name="G">Green, 0-255.</param>
/// <param name="B">Blue, 0-255.</param>
public readonly record struct ChartColor(byte R, byte G, byte B)
{
    /// <summary>The colour as <c>#rrggbb</c> (lower-case hex), as used in SVG.</summary>
    public string ToHex() => $"#{R:x2}{G:x2}{B:x2}";
}

/// <summary>
/// The chart palette: eight colours that stay distinct under the common forms of colour-vision
/// deficiency (the values of Okabe &amp; Ito 2008, "Color Universal Design"; names are ours).
/// </summary>
public static class Palette
{
    /// <summary>Deep blue, #0072b2.</summary>
    public static readonly ChartColor Ocean = new(0x00, 0x72, 0xB2);
    /// <summary>Orange, #e69f00.</summary>
    public static readonly ChartColor Amber = new(0xE6, 0x9F, 0x00);
    /// <summary>Bluish green, #009e73.</summary>
    public static readonly ChartColor Fern = new(0x00, 0x9E, 0x73);
    /// <summary>Vermilion, #d55e00.</summary>
    public static readonly ChartColor Rust = new(0xD5, 0x5E, 0x00);
    /// <summary>Reddish purple, #cc79a7.</summary>
    public static readonly ChartColor Orchid = new(0xCC, 0x79, 0xA7);
    /// <summary>Light blue, #56b4e9.</summary>
    public static readonly ChartColor Sky = new(0x56, 0xB4, 0xE9);
    /// <summary>Yellow, #f0e442 (low contrast on white: used late).</summary>
    public static readonly ChartColor Lemon = new(0xF0, 0xE4, 0x42);
    /// <summary>Black, #000000; the default for reference lines (dashed), last for series.</summary>
    public static readonly ChartColor Ink = new(0x00, 0x00, 0x00);

    /// <summary>The colours in the order series receive them.</summary>
    public static IReadOnlyList<ChartColor> SeriesOrder { get; } = [Ocean, Amber, Fern, Rust, Orchid, Sky, Lemon, Ink];

    /// <summary>The colour of the series at <paramref name="index"/> (cycles after eight).</summary>
    public static ChartColor ForIndex(int index) => SeriesOrder[((index % SeriesOrder.Count) + SeriesOrder.Count) % SeriesOrder.Count];
}

/// <summary>
/// One data series. Points whose x or y is NaN or infinite are not drawn and break a line.
/// The arrays are not copied: do not change them while a chart is being rendered.
/// </summary>
public sealed record Series
{
    /// <summary>Creates a series; <paramref name="xs"/> and <paramref name="ys"/> must have the same length.</summary>
    /// <param name="name">Legend text.</param>
    /// <param name="xs">X values.</param>
    /// <param name="ys">Y values.</param>
    /// <param name="kind">How the series is drawn.</param>
    /// <param name="color">Colour; null takes the palette colour of the series' position in the chart.</param>
    public Series(string name, ReadOnlyMemory<double> xs, ReadOnlyMemory<double> ys, SeriesKind kind = SeriesKind.Line, ChartColor? color = null)
    {
        ArgumentNullException.ThrowIfNull(name);
        if (xs.Length != ys.Length)
            throw new ArgumentException($"series '{name}': {xs.Length} x values but {ys.Length} y values", nameof(ys));
        Name = name; Xs = xs; Ys = ys; Kind = kind; Color = color;
    }

    /// <summary>A series with x = 0, 1, 2, ... (e.g. slot or round index).</summary>
    /// <param name="name">Legend text.</param>
    /// <param name="ys">Y values.</param>
    /// <param name="kind">How the series is drawn.</param>
    /// <param name="color">Colour, or null for the palette colour.</param>
    public static Series FromValues(string name, ReadOnlyMemory<double> ys, SeriesKind kind = SeriesKind.Line, ChartColor? color = null)
    {
        var xs = new double[ys.Length];
        for (int i = 0; i < xs.Length; i++) xs[i] = i;
        return new Series(name, xs, ys, kind, color);
    }

    /// <summary>Legend text.</summary>
    public string Name { get; init; }
    /// <summary>X values.</summary>
    public ReadOnlyMemory<double> Xs { get; }
    /// <summary>Y values.</summary>
    public ReadOnlyMemory<double> Ys { get; }
    /// <summary>How the series is drawn.</summary>
    public SeriesKind Kind { get; init; }
    /// <summary>Colour, or null for the palette colour of the series' position.</summary>
    public ChartColor? Color { get; init; }
}

/// <summary>A dashed horizontal line across the plot, e.g. a voltage or import limit.</summary>
/// <param name="Label">Legend text.</param>
/// <param name="Y">Height in data units.</param>
/// <param name="Color">Colour; null gives <see cref="Palette.Ink"/>.</param>
public sealed record ReferenceLine(string Label, double Y, ChartColor? Color = null);

/// <summary>A fixed axis range in data units; <paramref name="Min"/> must be below <paramref name="Max"/>.</summary>
/// <param name="Min">Lower end.</param>
/// <param name="Max">Upper end.</param>
public readonly record struct AxisRange(double Min, double Max);

/// <summary>A chart: title, axis labels, series and optional horizontal reference lines.</summary>
public sealed record Chart
{
    /// <summary>Creates a chart. Lists are copied.</summary>
    /// <param name="title">Title above the plot.</param>
    /// <param name="xLabel">X-axis label (include the unit, e.g. "time of day [h]").</param>
    /// <param name="yLabel">Y-axis label (include the unit).</param>
    /// <param name="series">Series, drawn in order (later ones on top).</param>
    /// <param name="referenceLines">Horizontal reference lines, or null for none.</param>
    public Chart(string title, string xLabel, string yLabel, IEnumerable<Series> series, IEnumerable<ReferenceLine>? referenceLines = null)
    {
        ArgumentNullException.ThrowIfNull(title);
        ArgumentNullException.ThrowIfNull(xLabel);
        ArgumentNullException.ThrowIfNull(yLabel);
        ArgumentNullException.ThrowIfNull(series);
        Title = title; XLabel = xLabel; YLabel = yLabel;
        Series = series.ToArray();
        ReferenceLines = referenceLines?.ToArray() ?? [];
    }

    /// <summary>Title above the plot.</summary>
    public string Title { get; init; }
    /// <summary>X-axis label.</summary>
    public string XLabel { get; init; }
    /// <summary>Y-axis label.</summary>
    public string YLabel { get; init; }
    /// <summary>Series in drawing order.</summary>
    public IReadOnlyList<Series> Series { get; init; }
    /// <summary>Horizontal reference lines.</summary>
    public IReadOnlyList<ReferenceLine> ReferenceLines { get; init; }
    /// <summary>Fixed x range, or null to fit the data and round out to nice ticks.</summary>
    public AxisRange? XRange { get; init; }
    /// <summary>Fixed y range, or null to fit the data and reference lines and round out to nice ticks.</summary>
    public AxisRange? YRange { get; init; }
}
