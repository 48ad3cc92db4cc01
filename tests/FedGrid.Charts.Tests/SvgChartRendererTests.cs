using System.Xml.Linq;

namespace FedGrid.Charts.Tests;

public sealed class SvgChartRendererTests
{
    private static readonly XNamespace Svg = "http://www.w3.org/2000/svg";

    private static Chart Sample(string title = "Bus voltages") =>
        new(title, "slot", "V [pu]",
            [new Series("bus 18", new double[] { 0, 1, 2, 3, 4 }, new double[] { 0.95, 0.94, double.NaN, 0.93, 0.96 }),
             new Series("bus 33", new double[] { 0, 2, 4 }, new double[] { 0.97, 0.96, 0.98 }, SeriesKind.Scatter, Palette.Orchid)],
            [new ReferenceLine("lower limit", 0.94)]);

    [Fact]
    public void Svg_ParsesAsXml_WithTitleLabelsAndSeries()
    {
        var doc = XDocument.Parse(SvgChartRenderer.Render(Sample(), 640, 400));
        var root = doc.Root!;
        Assert.Equal(Svg + "svg", root.Name);
        Assert.Equal("640", root.Attribute("width")!.Value);
        Assert.Equal("400", root.Attribute("height")!.Value);
        Assert.Equal("Bus voltages", root.Element(Svg + "title")!.Value);
        var texts = root.Descendants(Svg + "text").Select(t => t.Value).ToList();
        Assert.Contains("Bus voltages", texts);
        Assert.Contains("slot", texts);
        Assert.Contains("V [pu]", texts);
        Assert.Contains("bus 18", texts);
        Assert.Contains("lower limit", texts);

        var groups = root.Descendants(Svg + "g").Where(g => (string?)g.Attribute("class") == "series").ToList();
        Assert.Equal(["bus 18", "bus 33"], groups.Select(g => g.Attribute("data-name")!.Value));
        var paths = groups[0].Descendants(Svg + "path").ToList();
        Assert.Equal(2, paths.Count); // NaN splits the line in two
        Assert.All(paths, p => Assert.Equal(Palette.Ocean.ToHex(), p.Attribute("stroke")!.Value));
        Assert.Equal(3, groups[1].Descendants(Svg + "circle").Count(c => c.Attribute("fill")!.Value == "#cc79a7"));
        var limit = root.Descendants(Svg + "g").Single(g => (string?)g.Attribute("class") == "limit");
        Assert.NotNull(limit.Descendants(Svg + "path").Single().Attribute("stroke-dasharray"));
    }

    [Fact]
    public void Svg_UsesTheSameLayoutAsThePng()
    {
        var chart = Sample();
        var layout = ChartLayout.Compute(chart, 640, 400);
        var root = XDocument.Parse(SvgChartRenderer.Render(chart, 640, 400)).Root!;
        var texts = root.Descendants(Svg + "text").Select(t => t.Value).ToHashSet();
        foreach (double v in layout.YTicks.Values) Assert.Contains(layout.YTicks.Format(v), texts);
        foreach (double v in layout.XTicks.Values) Assert.Contains(layout.XTicks.Format(v), texts);
        var circle = root.Descendants(Svg + "circle").First();
        Assert.Equal(layout.MapX(0), double.Parse(circle.Attribute("cx")!.Value, System.Globalization.CultureInfo.InvariantCulture), 2);
        Assert.Equal(layout.MapY(0.97), double.Parse(circle.Attribute("cy")!.Value, System.Globalization.CultureInfo.InvariantCulture), 2);
    }

    [Fact]
    public void Svg_EscapesText()
    {
        string title = "Load <kW> & \"peak\" 'A'\u0001";
        var chart = Sample(title) with { Series = [new Series("a&b <c>", new double[] { 0, 1 }, new double[] { 0, 1 })] };
        string svg = SvgChartRenderer.Render(chart, 400, 300);
        Assert.DoesNotContain("<kW>", svg);
        var root = XDocument.Parse(svg).Root!;
        Assert.Equal("Load <kW> & \"peak\" 'A'\uFFFD", root.Element(Svg + "title")!.Value);
        Assert.Equal("a&b <c>", root.Descendants(Svg + "g").Single(g => (string?)g.Attribute("class") == "series").Attribute("data-name")!.Value);
    }

    [Fact]
    public void Svg_NumbersUseInvariantCulture()
    {
        var saved = Thread.CurrentThread.CurrentCulture;
        try
        {
            Thread.CurrentThread.CurrentCulture = System.Globalization.CultureInfo.InvariantCulture; // InvariantGlobalization: only invariant exists
            string svg = SvgChartRenderer.Render(Sample(), 640, 400);
            Assert.Matches("cx=\"[0-9]+(\\.[0-9]+)?\"", svg);
            Assert.DoesNotContain("NaN", svg);
        }
        finally { Thread.CurrentThread.CurrentCulture = saved; }
    }
}
