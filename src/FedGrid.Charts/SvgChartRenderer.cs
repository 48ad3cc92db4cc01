using System.Globalization;
using System.Text;

namespace FedGrid.Charts;

/// <summary>
/// Renders charts as standalone SVG text for offline HTML reports: the same layout as the PNG,
/// no scripts, no external references, no element ids (several charts can share one page).
/// </summary>
public static class SvgChartRenderer
{
    private const string FontFamily = "DejaVu Sans Mono, Menlo, Consolas, monospace";

    /// <summary>Renders <paramref name="chart"/> as an SVG document of <paramref name="width"/> x <paramref name="height"/> user units (pixels).</summary>
    /// <param name="chart">The chart.</param>
    /// <param name="width">Width in pixels (at least <see cref="ChartLayout.MinWidth"/>).</param>
    /// <param name="height">Height in pixels (at least <see cref="ChartLayout.MinHeight"/>).</param>
    /// <returns>An <c>&lt;svg&gt;</c> element in the SVG namespace, without an XML declaration.</returns>
    public static string Render(Chart chart, int width = 800, int height = 480)
    {
        var l = ChartLayout.Compute(chart, width, height);
        var sb = new StringBuilder();
        sb.Append($"<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width}\" height=\"{height}\" viewBox=\"0 0 {width} {height}\" role=\"img\">\n");
        sb.Append("<title>").Append(Escape(chart.Title)).Append("</title>\n");
        sb.Append($"<g font-family=\"{FontFamily}\" font-size=\"{10 * l.TextScale}\">\n");
        // A nested <svg> clips the data to the plot area without needing an id.
        string plotOpen = $"<svg x=\"{N(l.PlotLeft)}\" y=\"{N(l.PlotTop)}\" width=\"{N(l.PlotRight - l.PlotLeft + 1)}\" height=\"{N(l.PlotBottom - l.PlotTop + 1)}\" " +
                          $"viewBox=\"{N(l.PlotLeft)} {N(l.PlotTop)} {N(l.PlotRight - l.PlotLeft + 1)} {N(l.PlotBottom - l.PlotTop + 1)}\" overflow=\"hidden\">";
        foreach (var shape in ChartScene.Build(chart, l)) Write(sb, shape, l.TextScale, plotOpen);
        sb.Append("</g>\n</svg>\n");
        return sb.ToString();
    }

    private static void Write(StringBuilder sb, Shape shape, int s, string plotOpen)
    {
        switch (shape)
        {
            case RectShape r:
                sb.Append($"<rect x=\"{N(r.X)}\" y=\"{N(r.Y)}\" width=\"{N(r.W)}\" height=\"{N(r.H)}\" fill=\"{r.Fill.ToHex()}\"/>\n");
                break;
            case PathShape p:
                if (p.Clip) sb.Append(plotOpen);
                sb.Append("<path d=\"");
                for (int i = 0; i + 1 < p.Points.Length; i += 2)
                    sb.Append(i == 0 ? 'M' : 'L').Append(N(p.Points[i])).Append(',').Append(N(p.Points[i + 1])).Append(' ');
                sb.Length--;
                sb.Append($"\" fill=\"none\" stroke=\"{p.Color.ToHex()}\" stroke-width=\"{N(p.Width)}\" stroke-linejoin=\"round\" stroke-linecap=\"round\"");
                if (p.Dashed) sb.Append($" stroke-dasharray=\"{N(4 * p.Width)} {N(2.5 * p.Width)}\"");
                sb.Append("/>");
                if (p.Clip) sb.Append("</svg>");
                sb.Append('\n');
                break;
            case MarkerShape m:
                if (m.Clip) sb.Append(plotOpen);
                sb.Append($"<circle cx=\"{N(m.X)}\" cy=\"{N(m.Y)}\" r=\"{N(m.Radius)}\" fill=\"{m.Color.ToHex()}\"/>");
                if (m.Clip) sb.Append("</svg>");
                sb.Append('\n');
                break;
            case TextShape t:
                string anchor = t.Vertical ? "middle" : t.Align switch { TextAlign.Center => "middle", TextAlign.Right => "end", _ => "start" };
                if (t.Vertical)
                    sb.Append($"<text transform=\"translate({N(t.X + 7 * s)},{N(t.Top)}) rotate(-90)\" text-anchor=\"middle\"");
                else
                    sb.Append($"<text x=\"{N(t.X)}\" y=\"{N(t.Top + 7 * s)}\" text-anchor=\"{anchor}\"");
                sb.Append($" fill=\"{t.Color.ToHex()}\">").Append(Escape(t.Text)).Append("</text>\n");
                break;
            case GroupShape g:
                sb.Append($"<g class=\"{g.Role}\" data-name=\"{Escape(g.Name)}\">\n");
                foreach (var item in g.Items) Write(sb, item, s, plotOpen);
                sb.Append("</g>\n");
                break;
        }
    }

    private static string N(double v) => Math.Round(v, 2).ToString("0.##", CultureInfo.InvariantCulture);

    /// <summary>Escapes text for XML content and attribute values; characters XML 1.0 forbids become U+FFFD.</summary>
    private static string Escape(string text)
    {
        var sb = new StringBuilder(text.Length);
        for (int i = 0; i < text.Length; i++)
        {
            char c = text[i];
            switch (c)
            {
                case '&': sb.Append("&amp;"); break;
                case '<': sb.Append("&lt;"); break;
                case '>': sb.Append("&gt;"); break;
                case '"': sb.Append("&quot;"); break;
                case '\'': sb.Append("&apos;"); break;
                default:
                    if (char.IsHighSurrogate(c) && i + 1 < text.Length && char.IsLowSurrogate(text[i + 1])) { sb.Append(c).Append(text[++i]); }
                    else if (c is '\t' or '\n' or '\r' || (c >= 0x20 && c <= 0xD7FF) || (c >= 0xE000 && c <= 0xFFFD)) sb.Append(c);
                    else sb.Append('\uFFFD');
                    break;
            }
        }
        return sb.ToString();
    }
}
