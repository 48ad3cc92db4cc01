using FedGrid.Federation.Privacy;

namespace FedGrid.Federation.Tests;

public sealed class PrivacyFixedPointTests
{
    [Fact]
    public void RoundTripIsWithinHalfAResolution()
    {
        var enc = new FixedPointEncoding(maxAbsValue: 1000, maxParticipants: 64);
        Assert.Equal(Math.ScaleB(1.0, -24), enc.Resolution);
        double[] values = [0, 1, -1, 0.1, -0.1, 123.456789, -999.999999, 1000, -1000, 3e-8, -3e-8];
        var encoded = new ulong[values.Length];
        var decoded = new double[values.Length];
        enc.Encode(values, encoded);
        enc.Decode(encoded, decoded);
        for (int i = 0; i < values.Length; i++)
        {
            Assert.True(Math.Abs(decoded[i] - values[i]) <= enc.Resolution / 2, $"value {values[i]} decoded as {decoded[i]}");
        }
        // Negative values are two's-complement residues: −1 is 2^64 − 2^24.
        Assert.Equal(ulong.MaxValue - (1UL << 24) + 1, enc.Encode(-1.0));
    }

    [Fact]
    public void FloatRoundTripAndWrappingSumOfSignedValues()
    {
        var enc = new FixedPointEncoding(maxAbsValue: 10, maxParticipants: 3);
        float[] a = [1.5f, -2.25f, 9.75f], b = [-1.5f, -7.5f, 0.125f], c = [3f, 9.99f, -10f];
        var ea = new ulong[3];
        var eb = new ulong[3];
        var ec = new ulong[3];
        enc.Encode(a, ea);
        enc.Encode(b, eb);
        enc.Encode(c, ec);
        FixedPointEncoding.AddWrapping(ea, eb);
        FixedPointEncoding.AddWrapping(ea, ec); // wraps modulo 2^64 for the negative parts
        var sum = new float[3];
        enc.Decode(ea, sum);
        for (int i = 0; i < 3; i++)
        {
            Assert.Equal((double)a[i] + b[i] + c[i], sum[i], 5);
        }
        FixedPointEncoding.SubtractWrapping(ea, ec);
        FixedPointEncoding.SubtractWrapping(ea, eb);
        enc.Decode(ea, sum);
        Assert.Equal(a, sum);
    }

    [Fact]
    public void OverflowBoundIsCheckedAtConstruction()
    {
        // 2^63 · 2^-24 = 2^39 ≈ 5.5e11: 1e9 × 1000 households exceeds it, 1e8 × 1000 does not.
        var e = Assert.Throws<ArgumentOutOfRangeException>(() => new FixedPointEncoding(1e9, 1000));
        Assert.Contains("fixed-point overflow", e.Message);
        Assert.Contains("2^63", e.Message);
        _ = new FixedPointEncoding(1e8, 1000);
        // Fewer fractional bits buy range.
        _ = new FixedPointEncoding(1e9, 1000, fractionalBits: 16);
    }

    [Fact]
    public void ValuesAboveTheBoundAreRejectedNamingTheIndex()
    {
        var enc = new FixedPointEncoding(maxAbsValue: 5, maxParticipants: 10);
        var slots = new ulong[3];
        var e = Assert.Throws<OverflowException>(() => enc.Encode([1f, 5.5f, 0f], slots));
        Assert.Contains("[1]", e.Message);
        Assert.Throws<OverflowException>(() => enc.Encode([double.NaN], new ulong[1]));
        Assert.Throws<OverflowException>(() => enc.Encode(double.PositiveInfinity));
    }

    [Fact]
    public void TotalAtTheBoundStillDecodesExactly()
    {
        // The largest total the check admits: n values at the bound. Its residue must not wrap into the negatives.
        const int n = 1 << 15;
        double bound = Math.ScaleB(1.0, 63 - 24 - 15) * 0.999;
        var enc = new FixedPointEncoding(bound, n);
        ulong one = enc.Encode(bound);
        ulong sum = 0;
        for (int k = 0; k < n; k++)
        {
            sum = unchecked(sum + one);
        }
        Assert.Equal(bound * n, enc.Decode(sum), bound * n * 1e-12);
    }
}
