using System.Diagnostics;

namespace FedGrid.Charts.Tests;

public sealed class PngChartRendererTests
{
    private static readonly ChartColor Probe = new(10, 200, 30); // not in the palette, not a chrome colour

    private static Chart OneSeries(Series series, AxisRange? x = null, AxisRange? y = null, string title = "Probe") =>
        new(title, "x [h]", "y [kW]", [series]) { XRange = x ?? new AxisRange(0, 10), YRange = y ?? new AxisRange(0, 1) };

    private static (PngReader.Image Image, ChartLayout Layout) Draw(Chart chart, int w = 640, int h = 400) =>
        (PngReader.Read(PngChartRenderer.Render(chart, w, h)), ChartLayout.Compute(chart, w, h));

    private static bool IsProbe(PngReader.Image image, double x, double y) => image.At((int)x, (int)y) == (Probe.R, Probe.G, Probe.B);

    [Fact]
    public void Png_IsValidAndHasTheStatedSize()
    {
        var chart = new Chart("Feeder head load", "time of day [h]", "P [kW]",
            [Series.FromValues("base", new double[] { 3, 4, 6, 5, 2 }), Series.FromValues("controlled", new double[] { 3, 3.5, 4, 4, 3 }, SeriesKind.Step)],
            [new ReferenceLine("import limit", 5.5)]);
        var image = PngReader.Read(PngChartRenderer.Render(chart, 333, 211));
        Assert.Equal((333, 211), (image.Width, image.Height));
        Assert.Equal(["IHDR", "IDAT", "IEND"], image.ChunkTypes);
        Assert.Equal((255, 255, 255), ((int)image.At(0, 0).R, (int)image.At(0, 0).G, (int)image.At(0, 0).B));
    }

    [Fact]
    public void Layout_MapsTheAxisEndsToThePlotEdges()
    {
        var (_, l) = Draw(OneSeries(new Series("s", new double[] { 0, 10 }, new double[] { 0, 1 })));
        Assert.Equal(l.PlotLeft, l.MapX(0), 9);
        Assert.Equal(l.PlotRight, l.MapX(10), 9);
        Assert.Equal(l.PlotBottom, l.MapY(0), 9);
        Assert.Equal(l.PlotTop, l.MapY(1), 9);
        Assert.True(l.PlotLeft > 0 && l.PlotRight < 640 && l.PlotTop > 0 && l.PlotBottom < 400);
    }

    [Fact]
    public void Line_PutsItsColourWhereTheDataIs()
    {
        var (image, l) = Draw(OneSeries(new Series("s", new double[] { 0, 10 }, new double[] { 0, 1 }, color: Probe)));
        for (double x = 1; x < 10; x += 1.5)
            Assert.True(IsProbe(image, l.MapX(x), l.MapY(x / 10)), $"line pixel at x = {x}");
        Assert.False(IsProbe(image, l.MapX(2), l.MapY(0.6)));
        Assert.False(IsProbe(image, l.MapX(8), l.MapY(0.4)));
    }

    [Fact]
    public void NaN_BreaksTheLine()
    {
        var (image, l) = Draw(OneSeries(new Series("s", new double[] { 0, 2, 4, 6, 8, 10 }, new double[] { 0.5, 0.5, 0.5, double.NaN, 0.5, 0.5 }, color: Probe)));
        double row = l.MapY(0.5);
        Assert.True(IsProbe(image, l.MapX(3), row));
        Assert.True(IsProbe(image, l.MapX(9), row));
        Assert.False(IsProbe(image, l.MapX(5), row)); // between x = 4 and x = 8 nothing is drawn
        Assert.False(IsProbe(image, l.MapX(7), row));
    }

    [Fact]
    public void Step_HoldsUntilTheNextX()
    {
        var (image, l) = Draw(OneSeries(new Series("s", new double[] { 0, 5, 10 }, new double[] { 0.2, 0.8, 0.8 }, SeriesKind.Step, Probe)));
        Assert.True(IsProbe(image, l.MapX(2.5), l.MapY(0.2)));
        Assert.True(IsProbe(image, l.MapX(5), l.MapY(0.5)));  // the jump is vertical at x = 5
        Assert.False(IsProbe(image, l.MapX(2.5), l.MapY(0.5))); // no diagonal
    }

    [Fact]
    public void Scatter_DrawsMarkersOnlyAtPoints()
    {
        var (image, l) = Draw(OneSeries(new Series("s", new double[] { 2, 8 }, new double[] { 0.3, 0.7 }, SeriesKind.Scatter, Probe)));
        Assert.True(IsProbe(image, l.MapX(2), l.MapY(0.3)));
        Assert.True(IsProbe(image, l.MapX(8), l.MapY(0.7)));
        Assert.False(IsProbe(image, l.MapX(5), l.MapY(0.5)));
    }

    [Fact]
    public void FixedRange_ClipsDataToThePlot()
    {
        var (image, l) = Draw(OneSeries(new Series("s", new double[] { 0, 10 }, new double[] { -3, 4 }, color: Probe)));
        int count = 0;
        for (int y = 0; y < image.Height; y++)
            for (int x = 0; x < image.Width; x++)
                if (IsProbe(image, x, y))
                {
                    count++;
                    bool inLegend = x > l.PlotRight;
                    Assert.True(inLegend || (y >= l.PlotTop - 1 && y <= l.PlotBottom + 1), $"probe colour at ({x}, {y}) outside the plot");
                }
        Assert.True(count > 100);
    }

    [Fact]
    public void ReferenceLine_IsDashedAcrossThePlot()
    {
        var chart = OneSeries(new Series("s", new double[] { 0, 10 }, new double[] { 0.1, 0.2 })) with { ReferenceLines = [new ReferenceLine("limit", 0.75, Probe)] };
        var (image, l) = Draw(chart);
        int row = (int)l.MapY(0.75), on = 0, off = 0;
        for (int x = (int)l.PlotLeft + 2; x < (int)l.PlotRight - 2; x++) if (IsProbe(image, x, row)) on++; else off++;
        Assert.True(on > 0.4 * (on + off) && off > 0.15 * (on + off), $"dash pattern: {on} on, {off} off");
    }

    [Fact]
    public void Series_TakePaletteColoursInOrder_AndShowInTheLegend()
    {
        var chart = new Chart("t", "x", "y", [new Series("a", new double[] { 0, 10 }, new double[] { 0.25, 0.25 }), new Series("b", new double[] { 0, 10 }, new double[] { 0.75, 0.75 })])
        { XRange = new AxisRange(0, 10), YRange = new AxisRange(0, 1) };
        var (image, l) = Draw(chart);
        Assert.Equal((Palette.Ocean.R, Palette.Ocean.G, Palette.Ocean.B), image.At((int)l.MapX(5), (int)l.MapY(0.25)));
        Assert.Equal((Palette.Amber.R, Palette.Amber.G, Palette.Amber.B), image.At((int)l.MapX(5), (int)l.MapY(0.75)));
        bool legendSwatch = false;
        for (int y = (int)l.PlotTop; y < (int)l.PlotTop + 40; y++)
            for (int x = (int)l.PlotRight + 1; x < image.Width; x++)
                legendSwatch |= image.At(x, y) == (Palette.Amber.R, Palette.Amber.G, Palette.Amber.B);
        Assert.True(legendSwatch);
    }

    [Fact]
    public void Title_IsDrawnAboveThePlot()
    {
        static int Dark(PngReader.Image img, ChartLayout l) // above the plot, right of the y tick labels
        {
            int n = 0;
            for (int y = 0; y < (int)l.PlotTop - 2; y++) for (int x = (int)l.PlotLeft; x < (int)l.PlotRight; x++) if (img.At(x, y).R < 100) n++;
            return n;
        }
        var (withTitle, l1) = Draw(OneSeries(new Series("s", new double[] { 0, 1 }, new double[] { 0, 1 }), title: "Voltage at bus 18"));
        var (noTitle, l2) = Draw(OneSeries(new Series("s", new double[] { 0, 1 }, new double[] { 0, 1 }), title: ""));
        Assert.True(Dark(withTitle, l1) > 50);
        Assert.Equal(0, Dark(noTitle, l2));
        Assert.True(l2.PlotTop < l1.PlotTop);
    }

    [Fact]
    public void EmptyChart_StillRenders()
    {
        var image = PngReader.Read(PngChartRenderer.Render(new Chart("nothing yet", "x", "y", []), 200, 150));
        Assert.Equal((200, 150), (image.Width, image.Height));
    }

    [Fact]
    public void BadInput_IsRejected()
    {
        Assert.Throws<ArgumentException>(() => new Series("s", new double[3], new double[2]));
        var chart = new Chart("t", "x", "y", []);
        Assert.Throws<ArgumentOutOfRangeException>(() => PngChartRenderer.Render(chart, 50, 400));
        Assert.Throws<ArgumentOutOfRangeException>(() => SvgChartRenderer.Render(chart, 400, 20));
        Assert.Throws<ArgumentException>(() => PngChartRenderer.Render(chart with { YRange = new AxisRange(1, 1) }));
    }

    [Fact]
    public void Png_DecodesTheSameWithPythonStandardLibrary()
    {
        // Outside check: Debian's /usr/bin/python3, zlib + struct only (tests/reference/png_check.py),
        // verifies signature and chunk CRCs, inflates and unfilters independently of .NET.
        var chart = new Chart("Outside check", "slot", "kW", [Series.FromValues("s", new double[] { 0.1, 0.9, 0.4, double.NaN, 0.6 }, color: Probe)])
        { YRange = new AxisRange(0, 1) };
        var png = PngChartRenderer.Render(chart, 517, 301);
        var ours = PngReader.Read(png);
        var layout = ChartLayout.Compute(chart, 517, 301);
        string file = Path.Combine(Path.GetTempPath(), $"fedgrid-charts-{Guid.NewGuid():N}.png");
        File.WriteAllBytes(file, png);
        try
        {
            var points = new List<(int X, int Y)> { (0, 0), (516, 300), ((int)layout.MapX(0.5), (int)layout.MapY(0.5)), ((int)layout.MapX(2), (int)layout.MapY(0.4)) };
            var rng = new Random(3);
            for (int i = 0; i < 40; i++) points.Add((rng.Next(517), rng.Next(301)));
            var (exit, stdout, stderr) = RunPngCheck(file, points.Select(p => $"{p.X},{p.Y}"));
            Assert.True(exit == 0, $"png_check.py failed: {stderr}");
            var lines = stdout.Split('\n', StringSplitOptions.RemoveEmptyEntries);
            Assert.Equal("517 301", lines[0]);
            Assert.Equal(points.Count + 1, lines.Length);
            for (int i = 0; i < points.Count; i++)
            {
                var (r, g, b) = ours.At(points[i].X, points[i].Y);
                Assert.Equal($"{r} {g} {b}", lines[i + 1]);
            }
            Assert.Equal($"{Probe.R} {Probe.G} {Probe.B}", lines[3]); // on the segment from (0, 0.1) to (1, 0.9)
            Assert.Equal($"{Probe.R} {Probe.G} {Probe.B}", lines[4]); // the point (2, 0.4)
        }
        finally { File.Delete(file); }
    }

    [Fact]
    public void PythonCheck_RejectsACorruptedChunk()
    {
        // The outside check must be able to fail: one flipped bit in the IDAT data breaks its CRC.
        var png = PngChartRenderer.Render(new Chart("t", "x", "y", []), 200, 150);
        png[8 + 25 + 8 + 10] ^= 0x01; // signature, IHDR chunk (12 + 13 bytes), IDAT length and type, then data
        Assert.ThrowsAny<Exception>(() => PngReader.Read(png));
        string file = Path.Combine(Path.GetTempPath(), $"fedgrid-charts-{Guid.NewGuid():N}.png");
        File.WriteAllBytes(file, png);
        try
        {
            var (exit, _, stderr) = RunPngCheck(file, []);
            Assert.Equal(1, exit);
            Assert.Contains("CRC mismatch in chunk b'IDAT'", stderr);
        }
        finally { File.Delete(file); }
    }

    private static (int Exit, string Stdout, string Stderr) RunPngCheck(string file, IEnumerable<string> points)
    {
        string script = Path.Combine(AppContext.BaseDirectory, "reference", "png_check.py");
        var psi = new ProcessStartInfo("/usr/bin/python3") { RedirectStandardOutput = true, RedirectStandardError = true };
        psi.ArgumentList.Add(script);
        psi.ArgumentList.Add(file);
        foreach (var point in points) psi.ArgumentList.Add(point);
        using var p = Process.Start(psi)!;
        var stderrTask = p.StandardError.ReadToEndAsync();
        string stdout = p.StandardOutput.ReadToEnd();
        p.WaitForExit();
        return (p.ExitCode, stdout, stderrTask.Result);
    }

    [Fact]
    public void SampleChart_WrittenWhenAsked()
    {
        // Set FEDGRID_CHART_SAMPLE=/path/file.png to look at a typical chart by eye.
        var hours = Enumerable.Range(0, 96).Select(i => i / 4.0).ToArray();
        var baseLoad = hours.Select(h => 180 + 120 * Math.Exp(-Math.Pow(h - 19, 2) / 6) + 60 * Math.Exp(-Math.Pow(h - 8, 2) / 3)).ToArray();
        var controlled = baseLoad.Select((v, i) => Math.Min(v, 255 + 10 * Math.Sin(i / 5.0))).ToArray();
        controlled[40] = double.NaN;
        var price = hours.Select(h => h is >= 17 and < 21 ? 260.0 : h is >= 7 and < 17 ? 200 : 150).ToArray();
        var chart = new Chart("Feeder head demand, one invented winter day", "time of day [h]", "P [kW]",
            [new Series("no control", hours, baseLoad), new Series("federated policy", hours, controlled), new Series("tariff (scaled)", hours, price, SeriesKind.Step),
             new Series("households sampled", new double[] { 3, 6, 9, 12, 15, 18, 21 }, new double[] { 170, 230, 210, 190, 200, 290, 240 }, SeriesKind.Scatter)],
            [new ReferenceLine("substation limit", 270)]);
        var png = PngChartRenderer.Render(chart, 800, 480);
        Assert.Equal((800, 480), (PngReader.Read(png).Width, PngReader.Read(png).Height));
        if (Environment.GetEnvironmentVariable("FEDGRID_CHART_SAMPLE") is { Length: > 0 } path)
        {
            File.WriteAllBytes(path, png);
            File.WriteAllText(Path.ChangeExtension(path, ".svg"), SvgChartRenderer.Render(chart, 800, 480));
            File.WriteAllBytes(Path.ChangeExtension(path, ".small.png"), PngChartRenderer.Render(chart, 420, 260));
        }
    }
}
