using System.Security.Cryptography;
using FedGrid.Federation.Privacy;
using FedGrid.Grid.Numerics;

namespace FedGrid.Federation.Tests;

public sealed class PrivacyMaskTests
{
    private static readonly FixedPointEncoding Encoding = new(maxAbsValue: 100, maxParticipants: 64);

    private static float[][] Inputs(int households, int length, ulong seed)
    {
        var random = new SeededRandom(seed);
        return [.. Enumerable.Range(0, households).Select(_ => Enumerable.Range(0, length).Select(_ => (float)random.NextDouble(-50, 50)).ToArray())];
    }

    private static PairwiseMasker[] Maskers(MaskingKeyPair[] keys, int length)
    {
        byte[][] pub = PrivacyTestKeys.PublicKeys(keys);
        return [.. keys.Select((k, m) => new PairwiseMasker(m, k, pub, PrivacyTestKeys.Session, Encoding, length))];
    }

    [Fact]
    public void PairKeysAgreeFromBothSidesAndDependOnSessionAndPair()
    {
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(3, 11);
        byte[] k01 = PairwiseMask.DeriveKey(keys[0], keys[1].PublicKey, PrivacyTestKeys.Session, 0, 1);
        byte[] k10 = PairwiseMask.DeriveKey(keys[1], keys[0].PublicKey, PrivacyTestKeys.Session, 1, 0);
        Assert.Equal(k01, k10);
        Assert.NotEqual(k01, PairwiseMask.DeriveKey(keys[0], keys[1].PublicKey, "other session"u8, 0, 1));
        Assert.NotEqual(k01, PairwiseMask.DeriveKey(keys[0], keys[2].PublicKey, PrivacyTestKeys.Session, 0, 2));
    }

    [Theory]
    [InlineData(2, 1)]
    [InlineData(7, 37)]
    [InlineData(32, 64)]
    public void MasksCancelExactlyInTheSum(int households, int length)
    {
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(households, 21);
        PairwiseMasker[] maskers = Maskers(keys, length);
        float[][] x = Inputs(households, length, 22);
        var context = new MaskContext(Round: 3, Step: 17, Channel: 0);
        var maskedSum = new ulong[length];
        var plainSum = new ulong[length];
        var masked = new ulong[length];
        var encoded = new ulong[length];
        int differing = 0;
        for (int m = 0; m < households; m++)
        {
            maskers[m].Mask(context, x[m], masked);
            Encoding.Encode(x[m], encoded);
            differing += masked.Zip(encoded).Count(p => p.First != p.Second);
            FixedPointEncoding.AddWrapping(maskedSum, masked);
            FixedPointEncoding.AddWrapping(plainSum, encoded);
        }
        Assert.Equal(plainSum, maskedSum); // bit for bit, modulo 2^64
        Assert.Equal(households * length, differing); // and no single masked word equals its encoding
        using var unmasker = new MaskedSumUnmasker(PrivacyTestKeys.PublicKeys(keys), PrivacyTestKeys.Session, Encoding, threshold: 2, length);
        unmasker.Begin(context, length);
        for (int m = 0; m < households; m++)
        {
            maskers[m].Mask(context, x[m], masked);
            unmasker.Add(m, masked);
        }
        var total = new double[length];
        MaskedSumResult result = unmasker.Complete(null, total);
        Assert.Equal(MaskedSumStatus.Complete, result.Status);
        for (int i = 0; i < length; i++)
        {
            double expected = x.Sum(v => (double)v[i]);
            Assert.True(Math.Abs(total[i] - expected) <= households * Encoding.Resolution, $"coordinate {i}: {total[i]} vs {expected}");
        }
    }

    [Fact]
    public void EveryContextHasItsOwnMaskStream()
    {
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(2, 31);
        PairwiseMasker[] maskers = Maskers(keys, 8);
        float[] x = new float[8];
        var seen = new HashSet<ulong>();
        foreach (MaskContext c in new MaskContext[] { new(0, 0, 0), new(0, 1, 0), new(1, 0, 0), new(0, 0, 1) })
        {
            var masked = new ulong[8];
            maskers[0].Mask(c, x, masked);
            Assert.True(seen.Add(masked[0]), $"context {c} repeats a mask");
        }
        // The same context gives the same mask (both sides must regenerate it).
        var a = new ulong[8];
        var b = new ulong[8];
        maskers[0].Mask(new MaskContext(5, 6, 0), x, a);
        maskers[0].Mask(new MaskContext(5, 6, 0), x, b);
        Assert.Equal(a, b);
    }

    private sealed record Round(MaskingKeyPair[] Keys, PairwiseMasker[] Maskers, float[][] X, ShamirShare[][] Shares, MaskedSumUnmasker Unmasker);

    private static Round NewRound(int households, int threshold, int length, ulong seed)
    {
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(households, seed);
        // shares[d][k] = household k's share of household d's private scalar
        ShamirShare[][] shares = [.. keys.Select(k => k.SharePrivateScalar(households, threshold))];
        var unmasker = new MaskedSumUnmasker(PrivacyTestKeys.PublicKeys(keys), PrivacyTestKeys.Session, Encoding, threshold, length);
        return new Round(keys, Maskers(keys, length), Inputs(households, length, seed + 1), shares, unmasker);
    }

    private static MaskedSumResult Run(Round r, MaskContext context, ISet<int> dropped, double[] total, Func<int, int, ShamirShare, ShamirShare>? tamper = null)
    {
        int n = r.Keys.Length, length = total.Length;
        r.Unmasker.Begin(context, length);
        var masked = new ulong[length];
        for (int m = 0; m < n; m++)
        {
            if (!dropped.Contains(m))
            {
                r.Maskers[m].Mask(context, r.X[m], masked);
                r.Unmasker.Add(m, masked);
            }
        }
        Assert.Equal(dropped.OrderBy(d => d), r.Unmasker.Missing);
        // Each survivor returns its share of each dropped household's key.
        var returned = new Dictionary<int, IReadOnlyList<ShamirShare>>();
        foreach (int d in dropped)
        {
            returned[d] = [.. Enumerable.Range(0, n).Where(k => !dropped.Contains(k)).Select(k => tamper is null ? r.Shares[d][k] : tamper(d, k, r.Shares[d][k]))];
        }
        return r.Unmasker.Complete(returned, total);
    }

    [Fact]
    public void DropoutsAreRecoveredWithExactlyThresholdSurvivors()
    {
        const int n = 6, t = 4, length = 33;
        Round r = NewRound(n, t, length, 41);
        var dropped = new HashSet<int> { 2, 5 };
        var total = new double[length];
        MaskedSumResult result = Run(r, new MaskContext(1, 0, 0), dropped, total);
        Assert.Equal(new MaskedSumResult(MaskedSumStatus.Recovered, 4, 2, t, null), result);
        var expected = new ulong[length];
        var enc = new ulong[length];
        for (int m = 0; m < n; m++)
        {
            if (!dropped.Contains(m))
            {
                Encoding.Encode(r.X[m], enc);
                FixedPointEncoding.AddWrapping(expected, enc);
            }
        }
        var expectedTotal = new double[length];
        Encoding.Decode(expected, expectedTotal);
        Assert.Equal(expectedTotal, total); // exactly the survivors' encoded sum
        Assert.True(r.Unmasker.IsRevealed(2) && r.Unmasker.IsRevealed(5) && !r.Unmasker.IsRevealed(0));

        // Next step, same households missing: their masks are removed with the keys already rebuilt.
        result = Run(r, new MaskContext(1, 1, 0), dropped, total);
        Assert.Equal(MaskedSumStatus.Recovered, result.Status);
        Assert.Equal(expectedTotal, total);

        // A household whose key was rebuilt cannot come back under the same keys.
        r.Unmasker.Begin(new MaskContext(1, 2, 0), length);
        Assert.Throws<InvalidOperationException>(() => r.Unmasker.Add(2, new ulong[length]));
        r.Unmasker.Dispose();
    }

    [Fact]
    public void BelowThresholdTheRoundIsAbandonedNotMisSummed()
    {
        const int n = 6, t = 4, length = 9;
        Round r = NewRound(n, t, length, 51);
        var total = new double[length];
        MaskedSumResult result = Run(r, new MaskContext(2, 0, 0), new HashSet<int> { 0, 3, 4 }, total);
        Assert.Equal(MaskedSumStatus.Abandoned, result.Status);
        Assert.False(result.HasTotal);
        Assert.Equal(3, result.Survivors);
        Assert.Contains("needs 4", result.Reason);
        Assert.All(total, v => Assert.True(double.IsNaN(v)));
        Assert.False(r.Unmasker.IsRevealed(0)); // nothing was reconstructed
        r.Unmasker.Dispose();
    }

    [Fact]
    public void TamperedSharesAbandonTheRound()
    {
        const int n = 5, t = 3, length = 4;
        Round r = NewRound(n, t, length, 61);
        var total = new double[length];
        MaskedSumResult result = Run(r, new MaskContext(0, 0, 0), new HashSet<int> { 1 }, total,
            (d, k, s) => k == 0 ? s with { Value = (s.Value + 1) % ShamirSecretSharing.Prime } : s);
        Assert.Equal(MaskedSumStatus.Abandoned, result.Status);
        Assert.Contains("do not verify", result.Reason);
        Assert.All(total, v => Assert.True(double.IsNaN(v)));

        // Missing shares (only t − 1 returned) abandon as well.
        Round r2 = NewRound(n, t, length, 62);
        r2.Unmasker.Begin(new MaskContext(0, 0, 0), length);
        var masked = new ulong[length];
        for (int m = 1; m < n; m++)
        {
            r2.Maskers[m].Mask(new MaskContext(0, 0, 0), r2.X[m], masked);
            r2.Unmasker.Add(m, masked);
        }
        var few = new Dictionary<int, IReadOnlyList<ShamirShare>> { [0] = [r2.Shares[0][1], r2.Shares[0][2]] };
        Assert.Equal(MaskedSumStatus.Abandoned, r2.Unmasker.Complete(few, total).Status);
        r.Unmasker.Dispose();
        r2.Unmasker.Dispose();
    }

    [Fact]
    public void OneMaskedVectorLooksUniform()
    {
        // A highly structured input (every value 0.5) masked among 3 households. Household 1's masked vector
        // should be indistinguishable from uniform words: chi-square on the 256 byte values (255 degrees of freedom,
        // significance 0.001, critical value 330.52 from SciPy chi2.ppf(0.999, 255)) and a z test on each of the 64
        // bit positions (Bonferroni over 64 at overall 1e-4: |z| < 4.803, SciPy norm.isf(1e-4/128)). Seeded keys: the
        // outcome is deterministic. The same tests reject the unmasked encoding (the control).
        const int length = 20_000;
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(3, 71);
        PairwiseMasker[] maskers = Maskers(keys, length);
        float[] x = Enumerable.Repeat(0.5f, length).ToArray();
        var masked = new ulong[length];
        maskers[1].Mask(new MaskContext(0, 0, 0), x, masked);
        (double chi, double maxZ) = Uniformity(masked);
        Assert.True(chi < 330.52, $"byte chi-square {chi:F1} ≥ 330.52");
        Assert.True(maxZ < 4.803, $"bit-position |z| {maxZ:F2} ≥ 4.803");

        var plain = new ulong[length];
        Encoding.Encode(x, plain);
        (double chiPlain, double maxZPlain) = Uniformity(plain);
        Assert.True(chiPlain > 330.52 && maxZPlain > 4.803, "the control (unmasked encoding) must fail the uniformity tests");
    }

    private static (double Chi, double MaxZ) Uniformity(ulong[] words)
    {
        var bytes = new long[256];
        var ones = new long[64];
        foreach (ulong w in words)
        {
            for (int b = 0; b < 8; b++)
            {
                bytes[(int)((w >> (8 * b)) & 0xff)]++;
            }
            for (int bit = 0; bit < 64; bit++)
            {
                ones[bit] += (long)((w >> bit) & 1);
            }
        }
        double expected = words.Length * 8 / 256.0;
        double chi = bytes.Sum(c => (c - expected) * (c - expected) / expected);
        double n = words.Length;
        double maxZ = ones.Max(c => Math.Abs(c - n / 2) / Math.Sqrt(n / 4));
        return (chi, maxZ);
    }

    [Fact]
    public void MaskerAndUnmaskerCheckTheirInputs()
    {
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(3, 81);
        byte[][] pub = PrivacyTestKeys.PublicKeys(keys);
        Assert.Throws<ArgumentException>(() => new PairwiseMasker(0, keys[1], pub, PrivacyTestKeys.Session, Encoding, 4));
        Assert.Throws<ArgumentException>(() => new PairwiseMasker(0, keys[0], pub, PrivacyTestKeys.Session, new FixedPointEncoding(1, 2), 4));
        using var masker = new PairwiseMasker(0, keys[0], pub, PrivacyTestKeys.Session, Encoding, 4);
        Assert.Throws<ArgumentException>(() => masker.Mask(new MaskContext(0, 0, 0), new float[5], new ulong[5]));
        Assert.Throws<ArgumentOutOfRangeException>(() => masker.Mask(new MaskContext(-1, 0, 0), new float[4], new ulong[4]));
        Assert.Throws<ArgumentOutOfRangeException>(() => new MaskedSumUnmasker(pub, PrivacyTestKeys.Session, Encoding, threshold: 1, 4));
        using var unmasker = new MaskedSumUnmasker(pub, PrivacyTestKeys.Session, Encoding, threshold: 2, 4);
        Assert.Throws<InvalidOperationException>(() => unmasker.Add(0, new ulong[4]));
        unmasker.Begin(new MaskContext(0, 0, 0), 4);
        unmasker.Add(0, new ulong[4]);
        Assert.Throws<InvalidOperationException>(() => unmasker.Add(0, new ulong[4]));
        Assert.Throws<ArgumentException>(() => unmasker.Add(1, new ulong[3]));
        Assert.Throws<CryptographicException>(() => MaskingKeyPair.FromPrivateScalar(keys[0].ExportPrivateScalar(), keys[1].PublicKey));
    }
}
