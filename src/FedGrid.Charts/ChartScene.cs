namespace FedGrid.Charts;

internal enum TextAlign { Left, Center, Right }

internal abstract record Shape;

/// <summary>Filled axis-aligned rectangle.</summary>
internal sealed record RectShape(double X, double Y, double W, double H, ChartColor Fill) : Shape;

/// <summary>One continuous polyline; Points holds x0, y0, x1, y1, ... in canvas pixels.</summary>
internal sealed record PathShape(double[] Points, ChartColor Color, double Width, bool Dashed, bool Clip) : Shape;

/// <summary>Filled disc.</summary>
internal sealed record MarkerShape(double X, double Y, double Radius, ChartColor Color, bool Clip) : Shape;

/// <summary>Text in the built-in font; X is the anchor (per Align), Top the top of the glyph box. Vertical text reads bottom to top, centred on (X + h/2, Top).</summary>
internal sealed record TextShape(string Text, double X, double Top, TextAlign Align, ChartColor Color, bool Vertical = false) : Shape;

/// <summary>The shapes of one series or reference line, kept together so SVG can label them.</summary>
internal sealed record GroupShape(string Role, string Name, IReadOnlyList<Shape> Items) : Shape;

/// <summary>Turns a chart and its layout into a flat list of shapes both renderers draw.</summary>
internal static class ChartScene
{
    public static List<Shape> Build(Chart chart, ChartLayout l)
    {
        int s = l.TextScale, glyphH = 7 * s, tick = 4 * s;
        double lineW = 1.5 + 0.5 * s, markerR = 2.5 + 0.5 * s;
        var shapes = new List<Shape> { new RectShape(0, 0, l.Width, l.Height, ChartLayout.Background) };
        if (chart.Title.Length > 0)
            shapes.Add(new TextShape(chart.Title, l.Width / 2.0, 8 * s, TextAlign.Center, ChartLayout.TextColor));

        // Grid lines and tick labels, snapped to pixel centres so 1-pixel lines stay crisp.
        foreach (double v in l.YTicks.Values)
        {
            double y = Snap(l.MapY(v));
            shapes.Add(new PathShape([l.PlotLeft, y, l.PlotRight, y], ChartLayout.GridColor, 1, false, false));
            shapes.Add(new PathShape([l.PlotLeft - tick, y, l.PlotLeft, y], ChartLayout.AxisColor, 1, false, false));
            shapes.Add(new TextShape(l.YTicks.Format(v), l.PlotLeft - tick - 3 * s, Math.Round(y - glyphH / 2.0), TextAlign.Right, ChartLayout.TextColor));
        }
        foreach (double v in l.XTicks.Values)
        {
            double x = Snap(l.MapX(v));
            shapes.Add(new PathShape([x, l.PlotTop, x, l.PlotBottom], ChartLayout.GridColor, 1, false, false));
            shapes.Add(new PathShape([x, l.PlotBottom, x, l.PlotBottom + tick], ChartLayout.AxisColor, 1, false, false));
            shapes.Add(new TextShape(l.XTicks.Format(v), x, l.PlotBottom + tick + 3 * s, TextAlign.Center, ChartLayout.TextColor));
        }
        double ax = Snap(l.PlotLeft), ay = Snap(l.PlotBottom);
        shapes.Add(new PathShape([ax, l.PlotTop, ax, ay, l.PlotRight, ay], ChartLayout.AxisColor, 1, false, false));
        if (chart.XLabel.Length > 0)
            shapes.Add(new TextShape(chart.XLabel, (l.PlotLeft + l.PlotRight) / 2, l.Height - 8 * s - glyphH, TextAlign.Center, ChartLayout.TextColor));
        if (chart.YLabel.Length > 0)
            shapes.Add(new TextShape(chart.YLabel, 8 * s, (l.PlotTop + l.PlotBottom) / 2, TextAlign.Center, ChartLayout.TextColor, Vertical: true));

        // Data, then limits on top, then the legend to the right of the plot.
        double legendX = l.PlotRight + 8 * s, legendY = l.PlotTop + 2 * s, rowH = 12 * s;
        for (int i = 0; i < chart.Series.Count; i++)
        {
            var series = chart.Series[i];
            var color = series.Color ?? Palette.ForIndex(i);
            var items = new List<Shape>();
            AddSeries(series, color, l, lineW, markerR, items);
            shapes.Add(new GroupShape("series", series.Name, items));
            AddLegendRow(shapes, l, series.Name, color, series.Kind == SeriesKind.Scatter ? null : false, legendX, legendY + i * rowH, lineW, markerR);
        }
        for (int i = 0; i < chart.ReferenceLines.Count; i++)
        {
            var line = chart.ReferenceLines[i];
            var color = line.Color ?? Palette.Ink;
            var items = new List<Shape>();
            if (double.IsFinite(line.Y))
                items.Add(new PathShape([l.PlotLeft, l.MapY(line.Y), l.PlotRight, l.MapY(line.Y)], color, lineW, true, true));
            shapes.Add(new GroupShape("limit", line.Label, items));
            AddLegendRow(shapes, l, line.Label, color, true, legendX, legendY + (chart.Series.Count + i) * rowH, lineW, markerR);
        }
        return shapes;
    }

    private static double Snap(double v) => Math.Floor(v) + 0.5;

    private static void AddSeries(Series series, ChartColor color, ChartLayout l, double lineW, double markerR, List<Shape> items)
    {
        var xs = series.Xs.Span; var ys = series.Ys.Span;
        if (series.Kind == SeriesKind.Scatter)
        {
            for (int i = 0; i < xs.Length; i++)
                if (double.IsFinite(xs[i]) && double.IsFinite(ys[i]))
                    items.Add(new MarkerShape(l.MapX(xs[i]), l.MapY(ys[i]), markerR, color, true));
            return;
        }
        var run = new List<double>();
        for (int i = 0; i <= xs.Length; i++)
        {
            bool ok = i < xs.Length && double.IsFinite(xs[i]) && double.IsFinite(ys[i]);
            if (ok)
            {
                double x = l.MapX(xs[i]), y = l.MapY(ys[i]);
                if (series.Kind == SeriesKind.Step && run.Count > 0) { run.Add(x); run.Add(run[^2]); }
                run.Add(x); run.Add(y);
            }
            else if (run.Count > 0)
            {
                items.Add(new PathShape(run.ToArray(), color, lineW, false, true));
                run.Clear();
            }
        }
    }

    private static void AddLegendRow(List<Shape> shapes, ChartLayout l, string name, ChartColor color, bool? dashed, double x, double y, double lineW, double markerR)
    {
        int s = l.TextScale;
        double mid = y + 3.5 * s;
        if (dashed is null) shapes.Add(new MarkerShape(x + 8 * s, mid, markerR, color, false));
        else shapes.Add(new PathShape([x, mid, x + 16 * s, mid], color, lineW, dashed.Value, false));
        shapes.Add(new TextShape(Fit(name, l), x + 22 * s, y, TextAlign.Left, ChartLayout.TextColor));
    }

    private static string Fit(string text, ChartLayout l)
    {
        if (l.TextWidth(text) <= l.Legend) return text;
        int n = Math.Max(1, (l.Legend / l.TextScale + 1) / 6 - 2);
        return text[..Math.Min(n, text.Length)] + "..";
    }
}
