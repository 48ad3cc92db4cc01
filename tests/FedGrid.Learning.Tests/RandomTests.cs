using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tests;

public sealed class RandomTests
{
    [Fact]
    public void SplitMix64MatchesTheReferenceOutput()
    {
        // Reference outputs of SplitMix64 seeded with 1234567 (Vigna's splitmix64.c; values from memory of the
        // commonly quoted test sequence, re-derived here with an independent big-integer implementation below).
        ulong state = 1234567;
        ulong[] expected = Reference(1234567, 3);
        for (int i = 0; i < 3; i++)
        {
            Assert.Equal(expected[i], LearningRandom.SplitMix64(ref state));
        }
        Assert.Equal(6457827717110365317UL, expected[0]);
    }

    [Fact]
    public void SameSeedSameStreamAndMomentsAreRight()
    {
        var a = new LearningRandom(99);
        var b = new LearningRandom(99);
        for (int i = 0; i < 100; i++)
        {
            Assert.Equal(a.NextUInt64(), b.NextUInt64());
        }
        var r = new LearningRandom(7);
        int n = 200_000;
        double sum = 0, sumSq = 0;
        int[] counts = new int[5];
        for (int i = 0; i < n; i++)
        {
            double g = r.NextGaussian();
            sum += g;
            sumSq += g * g;
            counts[r.NextInt(5)]++;
            double u = r.NextDouble();
            Assert.InRange(u, 0.0, 1.0 - double.Epsilon);
        }
        Assert.Equal(0.0, sum / n, 0.01);
        Assert.Equal(1.0, sumSq / n, 0.01);
        Assert.All(counts, c => Assert.InRange(c, n / 5 - 1000, n / 5 + 1000));
        Assert.NotEqual(LearningRandom.DeriveSeed(1, 0), LearningRandom.DeriveSeed(1, 1));
    }

    private static ulong[] Reference(ulong seed, int count)
    {
        var mask = (System.Numerics.BigInteger.One << 64) - 1;
        System.Numerics.BigInteger x = seed;
        var result = new ulong[count];
        for (int i = 0; i < count; i++)
        {
            x = (x + 0x9E3779B97F4A7C15UL) & mask;
            var z = x;
            z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL) & mask;
            z = ((z ^ (z >> 27)) * 0x94D049BB133111EBUL) & mask;
            result[i] = (ulong)(z ^ (z >> 31));
        }
        return result;
    }
}
