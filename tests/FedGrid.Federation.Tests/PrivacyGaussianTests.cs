using FedGrid.Federation.Privacy;

namespace FedGrid.Federation.Tests;

public sealed class PrivacyGaussianTests
{
    [Fact]
    public void ClippingScalesOnlyVectorsAboveTheNorm()
    {
        float[] big = [3, 4]; // norm 5
        Assert.Equal(5, GaussianMechanism.ClipL2(big, 1), 12);
        Assert.Equal(0.6f, big[0], 6);
        Assert.Equal(0.8f, big[1], 6);
        double[] small = [0.3, 0.4];
        Assert.Equal(0.5, GaussianMechanism.ClipL2(small, 1), 12);
        Assert.Equal([0.3, 0.4], small);
        Assert.Throws<ArgumentException>(() => GaussianMechanism.ClipL2(new float[] { float.NaN }, 1));
    }

    [Fact]
    public void NoiseHasTheStatedStandardDeviationAndIsSeeded()
    {
        // z·C = 0.5 · 2 = 1. Over 200 000 draws the sample mean is within 4.5 standard errors of 0 and the sample
        // variance within 4.5 of its standard error √(2/n) of 1 (normal theory, common practice).
        const int n = 200_000;
        var mech = new GaussianMechanism(clipNorm: 2, noiseMultiplier: 0.5, seed: 7);
        var v = new double[n];
        mech.Apply(v);
        double mean = v.Average(), variance = v.Sum(x => (x - mean) * (x - mean)) / (n - 1);
        Assert.InRange(mean, -4.5 / Math.Sqrt(n), 4.5 / Math.Sqrt(n));
        Assert.InRange(variance, 1 - 4.5 * Math.Sqrt(2.0 / n), 1 + 4.5 * Math.Sqrt(2.0 / n));
        var again = new double[n];
        new GaussianMechanism(2, 0.5, 7).Apply(again);
        Assert.Equal(v, again);
        var f = new float[] { 30, 40 };
        Assert.Equal(50, new GaussianMechanism(2, 0, 1).Apply(f), 12);
        Assert.Equal(2, Math.Sqrt(f[0] * f[0] + f[1] * f[1]), 5); // clipping only when z = 0
        Assert.Throws<ArgumentOutOfRangeException>(() => new GaussianMechanism(0, 1, 1));
        Assert.Throws<ArgumentOutOfRangeException>(() => new GaussianMechanism(1, -1, 1));
    }
}
