using FedGrid.Grid.Numerics;

namespace FedGrid.Grid.Tests;

public sealed class SeededRandomTests
{
    [Fact]
    public void Same_seed_gives_same_sequence_and_streams_differ()
    {
        var a = new SeededRandom(7);
        var b = new SeededRandom(7);
        var c = new SeededRandom(8);
        var s1 = SeededRandom.ForStream(7, 1);
        var s2 = SeededRandom.ForStream(7, 2);
        bool anyDiff = false, streamDiff = false;
        for (int i = 0; i < 100; i++)
        {
            ulong x = a.NextUInt64();
            Assert.Equal(x, b.NextUInt64());
            anyDiff |= x != c.NextUInt64();
            streamDiff |= s1.NextUInt64() != s2.NextUInt64();
        }
        Assert.True(anyDiff);
        Assert.True(streamDiff);
    }

    [Fact]
    public void Uniform_doubles_have_the_moments_of_U01()
    {
        // U(0,1): mean 1/2, variance 1/12. With 200 000 draws the standard error of the mean is ~0.00065.
        var rng = new SeededRandom(123);
        const int n = 200_000;
        double sum = 0, sum2 = 0;
        for (int i = 0; i < n; i++)
        {
            double u = rng.NextDouble();
            Assert.InRange(u, 0.0, 1.0 - 1e-17);
            sum += u;
            sum2 += u * u;
        }
        double mean = sum / n, variance = sum2 / n - mean * mean;
        Assert.InRange(mean, 0.5 - 0.004, 0.5 + 0.004);
        Assert.InRange(variance, 1.0 / 12 - 0.002, 1.0 / 12 + 0.002);
    }

    [Fact]
    public void Gaussian_has_mean_0_variance_1_and_normal_tails()
    {
        var rng = new SeededRandom(99);
        const int n = 200_000;
        double sum = 0, sum2 = 0;
        int beyond2 = 0;
        for (int i = 0; i < n; i++)
        {
            double g = rng.NextGaussian();
            sum += g;
            sum2 += g * g;
            if (Math.Abs(g) > 1.959964) beyond2++;
        }
        Assert.InRange(sum / n, -0.01, 0.01);
        Assert.InRange(sum2 / n, 0.98, 1.02);
        // P(|Z| > 1.96) = 0.05 for the standard normal (tables).
        Assert.InRange(beyond2 / (double)n, 0.047, 0.053);
    }

    [Fact]
    public void Integers_cover_their_range_uniformly()
    {
        var rng = new SeededRandom(5);
        var counts = new int[6];
        const int n = 60_000;
        for (int i = 0; i < n; i++) counts[rng.NextInt(6)]++;
        // Chi-square with 5 degrees of freedom: the 0.999 quantile is 20.5 (tables).
        double chi2 = counts.Sum(c => (c - n / 6.0) * (c - n / 6.0) / (n / 6.0));
        Assert.True(chi2 < 20.5, $"chi-square {chi2}");
        for (int i = 0; i < 1000; i++) Assert.InRange(rng.NextInt(-3, 4), -3, 3);
        Assert.Equal(int.MinValue, new SeededRandom(1).NextInt(int.MinValue, int.MinValue + 1));
        Assert.Throws<ArgumentOutOfRangeException>(() => rng.NextInt(0));
        Assert.Throws<ArgumentOutOfRangeException>(() => rng.NextInt(4, 4));
    }
}
