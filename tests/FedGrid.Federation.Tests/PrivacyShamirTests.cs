using System.Numerics;
using FedGrid.Federation.Privacy;

namespace FedGrid.Federation.Tests;

public sealed class PrivacyShamirTests
{
    [Fact]
    public void FieldIsTheMersennePrime2To521Minus1()
    {
        // 2^521 − 1 is prime (Robinson 1952); check it against a Fermat test with several bases as a guard on the constant.
        BigInteger p = ShamirSecretSharing.Prime;
        Assert.Equal(521, (int)p.GetBitLength());
        foreach (int a in new[] { 2, 3, 5, 7, 11 })
        {
            Assert.Equal(BigInteger.One, BigInteger.ModPow(a, p - 1, p));
        }
    }

    [Fact]
    public void AnyThresholdSubsetRecoversTheSecret()
    {
        byte[] secret = Convert.FromHexString("00ff" + new string('a', 60)); // 32 bytes, leading zero kept
        ShamirShare[] shares = ShamirSecretSharing.Split(secret, shareCount: 7, threshold: 4);
        Assert.Equal([1, 2, 3, 4, 5, 6, 7], shares.Select(s => s.Index));
        int subsets = 0;
        for (int mask = 0; mask < 1 << 7; mask++)
        {
            if (BitOperations.PopCount((uint)mask) < 4)
            {
                continue;
            }
            ShamirShare[] subset = [.. shares.Where((_, i) => (mask >> i & 1) == 1)];
            Assert.Equal(secret, ShamirSecretSharing.Combine(subset, 4, secret.Length));
            subsets++;
        }
        Assert.Equal(64, subsets); // C(7,4)+C(7,5)+C(7,6)+C(7,7)
    }

    [Fact]
    public void BelowThresholdIsRefused()
    {
        ShamirShare[] shares = ShamirSecretSharing.Split([1, 2, 3], 5, 3);
        Assert.Throws<ArgumentException>(() => ShamirSecretSharing.Combine(shares[..2], 3, 3));
        // Duplicates do not count twice.
        Assert.Throws<ArgumentException>(() => ShamirSecretSharing.Combine([shares[0], shares[0], shares[1]], 3, 3));
    }

    [Fact]
    public void ThresholdMinusOneSharesAreConsistentWithAnySecret()
    {
        // Perfect secrecy, constructively: for t = 2 any single share is matched by a line through (0, s') for every s'.
        ShamirShare one = ShamirSecretSharing.Split([42], 3, 2)[0];
        foreach (int other in new[] { 0, 7, 255 })
        {
            BigInteger slope = ((one.Value - other) % ShamirSecretSharing.Prime + ShamirSecretSharing.Prime) % ShamirSecretSharing.Prime;
            var fake = new ShamirShare(2, (other + 2 * slope) % ShamirSecretSharing.Prime);
            Assert.Equal([(byte)other], ShamirSecretSharing.Combine([one, fake], 2, 1));
        }
    }

    [Fact]
    public void ArgumentsAreChecked()
    {
        Assert.Throws<ArgumentException>(() => ShamirSecretSharing.Split(new byte[65], 3, 2));
        Assert.Throws<ArgumentOutOfRangeException>(() => ShamirSecretSharing.Split([1], 3, 4));
        Assert.Throws<ArgumentOutOfRangeException>(() => ShamirSecretSharing.Split([1], 3, 0));
        Assert.Throws<ArgumentException>(() => ShamirSecretSharing.Combine([new ShamirShare(0, 1), new ShamirShare(1, 1)], 2, 1));
    }
}
