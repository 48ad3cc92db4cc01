namespace FedGrid.Charts.Tests;

public sealed class AxisTicksTests
{
    // Expected values worked by hand: step = (max - min) / (n - 1) rounded to the nearest of 1, 2, 5
    // times a power of ten (Heckbert, "Nice numbers for graph labels", Graphics Gems 1990: f < 1.5 -> 1,
    // < 3 -> 2, < 7 -> 5, else 10), axis widened to the enclosing multiples of the step.
    [Theory]
    [InlineData(0, 10, 6, 0, 10, 2)]
    [InlineData(0.13, 0.87, 6, 0.1, 0.9, 0.1)]
    [InlineData(-3.7, 12.2, 8, -4, 14, 2)]
    [InlineData(0.95, 1.05, 6, 0.94, 1.06, 0.02)]
    [InlineData(0, 23.75, 7, 0, 25, 5)]
    [InlineData(1200, 8700, 5, 0, 10000, 2000)]
    public void Nice_KnownRanges(double min, double max, int n, double lo, double hi, double step)
    {
        var t = AxisTicks.Nice(min, max, n);
        Assert.Equal(lo, t.Min, 12);
        Assert.Equal(hi, t.Max, 12);
        Assert.Equal(step, t.Step, 12);
        Assert.Equal(lo, t.Values[0], 12);
        Assert.Equal(hi, t.Values[^1], 12);
    }

    [Fact]
    public void Nice_StepsAreOneTwoFiveAndCoverTheData()
    {
        var rng = new Random(11);
        for (int k = 0; k < 2000; k++)
        {
            double a = (rng.NextDouble() - 0.5) * Math.Pow(10, rng.Next(-6, 7));
            double b = a + rng.NextDouble() * Math.Pow(10, rng.Next(-6, 7));
            int n = rng.Next(3, 11);
            var t = AxisTicks.Nice(a, b, n);
            double mantissa = t.Step / Math.Pow(10, Math.Floor(Math.Log10(t.Step) + 1e-12));
            Assert.Contains(Math.Round(mantissa, 9), new[] { 1.0, 2.0, 5.0 });
            Assert.True(t.Min <= a + t.Step * 1e-9 && t.Max >= b - t.Step * 1e-9, $"[{t.Min}, {t.Max}] covers [{a}, {b}]"); // up to rounding
            Assert.InRange(t.Values.Count, 2, 2 * n + 1);
            for (int i = 0; i < t.Values.Count; i++)
                Assert.Equal(t.Min + i * t.Step, t.Values[i], Math.Max(t.Step * 1e-9, Math.Abs(t.Values[i]) * 1e-12));
        }
    }

    [Fact]
    public void Fixed_KeepsTheRangeAndPutsTicksInside()
    {
        var t = AxisTicks.Fixed(0.9, 1.1, 6); // a voltage band in per unit
        Assert.Equal(0.9, t.Min);
        Assert.Equal(1.1, t.Max);
        Assert.Equal(0.05, t.Step, 12);
        Assert.Equal(new[] { 0.9, 0.95, 1.0, 1.05, 1.1 }, t.Values.Select(v => Math.Round(v, 9)));
        var u = AxisTicks.Fixed(0.13, 0.87, 6);
        Assert.Equal(new[] { 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8 }, u.Values.Select(v => Math.Round(v, 9)));
    }

    [Fact]
    public void DegenerateRange_IsPadded()
    {
        var t = AxisTicks.Nice(5, 5);
        Assert.True(t.Min < 5 && t.Max > 5);
        var z = AxisTicks.Nice(0, 0);
        Assert.True(z.Min < 0 && z.Max > 0);
    }

    [Fact]
    public void Format_ShowsTheStepsDecimalsAndNoNegativeZero()
    {
        var t = AxisTicks.Nice(-0.3, 0.3, 7); // step 0.1
        Assert.Equal(1, t.Decimals);
        Assert.Equal(["-0.3", "-0.2", "-0.1", "0.0", "0.1", "0.2", "0.3"], t.Values.Select(t.Format));
        var big = AxisTicks.Nice(0, 4e7, 5);
        Assert.Equal("4E+7", big.Format(4e7));
        Assert.Equal("1500", AxisTicks.Nice(0, 2000, 5).Format(1500));
    }

    [Fact]
    public void NiceNumber_RoundsToOneTwoFive()
    {
        Assert.Equal(2, AxisTicks.NiceNumber(1.6, round: true));
        Assert.Equal(5, AxisTicks.NiceNumber(3.1, round: true));
        Assert.Equal(10, AxisTicks.NiceNumber(7.2, round: true));
        Assert.Equal(5, AxisTicks.NiceNumber(2.1, round: false));
        Assert.Equal(0.01, AxisTicks.NiceNumber(0.0095, round: false), 15);
        Assert.Throws<ArgumentOutOfRangeException>(() => AxisTicks.NiceNumber(0, true));
    }

    [Fact]
    public void RejectsNonFiniteRanges()
    {
        Assert.Throws<ArgumentException>(() => AxisTicks.Nice(0, double.NaN));
        Assert.Throws<ArgumentException>(() => AxisTicks.Fixed(double.NegativeInfinity, 1));
    }
}
