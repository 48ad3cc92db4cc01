using System.Numerics;
using FedGrid.Grid.Numerics;
using FedGrid.Learning.Randomness;

namespace FedGrid.Federation.Tests;

/// <summary>The data generators' and the learners' random numbers come from one bit generator.</summary>
public sealed class SharedGeneratorTests
{
    [Theory]
    [InlineData(0UL)]
    [InlineData(20261201UL)]
    [InlineData(ulong.MaxValue)]
    public void BothPublicGeneratorsGiveTheBitsOfXoshiro256StarStarSeededBySplitMix64(ulong seed)
    {
        var data = new SeededRandom(seed);
        var learning = new LearningRandom(seed);
        ulong[] reference = Reference(seed, 1000);
        for (int i = 0; i < reference.Length; i += 2)
        {
            Assert.Equal(reference[i], data.NextUInt64());
            Assert.Equal(reference[i], learning.NextUInt64());
            // Uniform doubles take the top 53 bits of the next output in both.
            Assert.Equal((reference[i + 1] >> 11) * (1.0 / (1UL << 53)), data.NextDouble());
            Assert.Equal((reference[i + 1] >> 11) * (1.0 / (1UL << 53)), learning.NextDouble());
        }
    }

    /// <summary>
    /// An independent implementation from the published algorithm descriptions (Blackman &amp; Vigna, "Scrambled linear
    /// pseudorandom number generators", 2018, xoshiro256**; Steele, Lea &amp; Flood 2014 for SplitMix64), in arbitrary
    /// precision arithmetic reduced mod 2^64 rather than native wrapping, so it shares no code with the generator.
    /// </summary>
    private static ulong[] Reference(ulong seed, int count)
    {
        BigInteger mod = BigInteger.One << 64, x = seed;
        BigInteger Mix()
        {
            x = (x + BigInteger.Parse("11400714819323198485")) % mod; // 0x9E3779B97F4A7C15
            BigInteger z = x;
            z = ((z ^ (z >> 30)) * BigInteger.Parse("13787848793156543929")) % mod; // 0xBF58476D1CE4E5B9
            z = ((z ^ (z >> 27)) * BigInteger.Parse("10723151780598845931")) % mod; // 0x94D049BB133111EB
            return z ^ (z >> 31);
        }
        BigInteger Rotl(BigInteger v, int k) => ((v << k) % mod) | (v >> (64 - k));
        BigInteger[] s = [Mix(), Mix(), Mix(), Mix()];
        var output = new ulong[count];
        for (int i = 0; i < count; i++)
        {
            output[i] = (ulong)((Rotl(s[1] * 5 % mod, 7) * 9) % mod);
            BigInteger t = (s[1] << 17) % mod;
            s[2] ^= s[0];
            s[3] ^= s[1];
            s[1] ^= s[2];
            s[0] ^= s[3];
            s[2] ^= t;
            s[3] = Rotl(s[3], 45);
        }
        return output;
    }
}
