namespace FedGrid.Charts.Tests;

public sealed class ChartDataTests
{
    [Fact]
    public void Palette_HasEightDistinctColoursAndCycles()
    {
        // Okabe & Ito (2008) colour-universal-design values, e.g. vermilion #D55E00, bluish green #009E73.
        Assert.Equal(8, Palette.SeriesOrder.Distinct().Count());
        Assert.Equal("#d55e00", Palette.Rust.ToHex());
        Assert.Equal("#009e73", Palette.Fern.ToHex());
        Assert.Equal(Palette.Ocean, Palette.ForIndex(0));
        Assert.Equal(Palette.ForIndex(1), Palette.ForIndex(9));
        Assert.Equal(Palette.ForIndex(7), Palette.ForIndex(-1));
    }

    [Fact]
    public void Chart_CopiesItsLists()
    {
        var series = new List<Series> { Series.FromValues("a", new double[] { 1, 2 }) };
        var chart = new Chart("t", "x", "y", series);
        series.Add(Series.FromValues("b", new double[] { 3 }));
        Assert.Single(chart.Series);
        Assert.Empty(chart.ReferenceLines);
    }

    [Fact]
    public void FromValues_NumbersThePoints()
    {
        var s = Series.FromValues("a", new double[] { 5, 6, 7 }, SeriesKind.Step);
        Assert.Equal(new double[] { 0, 1, 2 }, s.Xs.ToArray());
        Assert.Equal(SeriesKind.Step, s.Kind);
        Assert.Null(s.Color);
    }
}
