namespace FedGrid.Federation.Privacy;

/// <summary>
/// Fixed-point encoding of real values in the ring Z_2^64, the carrier of masked sums. A value v is encoded as the
/// two's-complement residue of round(v · 2^f) (f = <see cref="FractionalBits"/>, round half to even), so sums wrap
/// modulo 2^64 and a total decodes exactly as long as its magnitude stays below 2^63 · 2^-f.
/// <para>
/// Overflow bound: with at most <see cref="MaxParticipants"/> summands of magnitude at most <see cref="MaxAbsValue"/>,
/// the total is below <c>MaxParticipants · MaxAbsValue</c>; the constructor requires
/// <c>MaxParticipants · MaxAbsValue · 2^f &lt; 2^63</c> (with one unit of rounding per summand as margin), and
/// <see cref="Encode(ReadOnlySpan{float}, Span{ulong})"/> rejects every value above <see cref="MaxAbsValue"/>, so a
/// decoded total is never a wrapped one. Default: f = 24 (resolution 2^-24 ≈ 5.96e-8), which leaves
/// |value| · households &lt; 2^39 ≈ 5.5e11.
/// </para>
/// </summary>
public sealed class FixedPointEncoding
{
    /// <summary>Default number of fractional bits (resolution 2^-24).</summary>
    public const int DefaultFractionalBits = 24;

    private readonly double _scale;
    private readonly double _inverseScale;

    /// <summary>Creates an encoding and checks its overflow bound.</summary>
    /// <param name="maxAbsValue">Largest magnitude of one encoded value (positive, finite).</param>
    /// <param name="maxParticipants">Largest number of encoded vectors summed (at least 1).</param>
    /// <param name="fractionalBits">f, between 0 and 52.</param>
    /// <exception cref="ArgumentOutOfRangeException">A parameter is out of range, or the bound
    /// <c>maxParticipants · maxAbsValue · 2^f &lt; 2^63</c> does not hold.</exception>
    public FixedPointEncoding(double maxAbsValue, int maxParticipants, int fractionalBits = DefaultFractionalBits)
    {
        if (fractionalBits is < 0 or > 52)
        {
            throw new ArgumentOutOfRangeException(nameof(fractionalBits), fractionalBits, "fixed-point fractional bits must be between 0 and 52");
        }
        if (!(maxAbsValue > 0) || !double.IsFinite(maxAbsValue))
        {
            throw new ArgumentOutOfRangeException(nameof(maxAbsValue), maxAbsValue, "fixed-point bound on |value| must be positive and finite");
        }
        if (maxParticipants < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(maxParticipants), maxParticipants, "fixed-point sums need at least one participant");
        }
        _scale = Math.ScaleB(1.0, fractionalBits);
        _inverseScale = Math.ScaleB(1.0, -fractionalBits);
        double worst = maxParticipants * (maxAbsValue * _scale + 1.0);
        if (!(worst < Math.ScaleB(1.0, 63)))
        {
            throw new ArgumentOutOfRangeException(
                nameof(maxAbsValue),
                maxAbsValue,
                $"fixed-point overflow: {maxParticipants} participants × |value| ≤ {maxAbsValue:G6} at 2^-{fractionalBits} resolution needs "
                + $"{Math.Log2(worst):F2} bits; the ring Z_2^64 holds signed totals below 2^63 (lower the bound, the participants or the fractional bits)");
        }
        FractionalBits = fractionalBits;
        MaxAbsValue = maxAbsValue;
        MaxParticipants = maxParticipants;
    }

    /// <summary>Number of fractional bits f: the resolution is 2^-f.</summary>
    public int FractionalBits { get; }

    /// <summary>Largest magnitude a single encoded value may have.</summary>
    public double MaxAbsValue { get; }

    /// <summary>Largest number of vectors whose sum still decodes exactly.</summary>
    public int MaxParticipants { get; }

    /// <summary>The resolution 2^-f (the largest rounding error of one value is half of it).</summary>
    public double Resolution => _inverseScale;

    /// <summary>Encodes one value.</summary>
    /// <param name="value">The value (finite, |value| ≤ <see cref="MaxAbsValue"/>).</param>
    /// <returns>Its residue in Z_2^64.</returns>
    /// <exception cref="OverflowException">The value is not finite or above the bound.</exception>
    public ulong Encode(double value)
    {
        if (!(Math.Abs(value) <= MaxAbsValue))
        {
            throw new OverflowException($"fixed-point encoding: value {value:G9} is outside ±{MaxAbsValue:G6} (the bound the overflow check was made for)");
        }
        return unchecked((ulong)(long)Math.Round(value * _scale, MidpointRounding.ToEven));
    }

    /// <summary>Encodes single-precision values.</summary>
    /// <param name="values">The values.</param>
    /// <param name="encoded">Receives one residue per value (same length).</param>
    /// <exception cref="OverflowException">A value is not finite or above the bound (names its index).</exception>
    public void Encode(ReadOnlySpan<float> values, Span<ulong> encoded)
    {
        CheckLengths(values.Length, encoded.Length);
        for (int i = 0; i < values.Length; i++)
        {
            encoded[i] = EncodeAt(values[i], i);
        }
    }

    /// <summary>Encodes double-precision values.</summary>
    /// <param name="values">The values.</param>
    /// <param name="encoded">Receives one residue per value (same length).</param>
    /// <exception cref="OverflowException">A value is not finite or above the bound (names its index).</exception>
    public void Encode(ReadOnlySpan<double> values, Span<ulong> encoded)
    {
        CheckLengths(values.Length, encoded.Length);
        for (int i = 0; i < values.Length; i++)
        {
            encoded[i] = EncodeAt(values[i], i);
        }
    }

    /// <summary>Decodes one residue (a value or a sum of at most <see cref="MaxParticipants"/> values).</summary>
    /// <param name="encoded">The residue.</param>
    /// <returns>The signed value.</returns>
    public double Decode(ulong encoded) => unchecked((long)encoded) * _inverseScale;

    /// <summary>Decodes residues into single precision.</summary>
    /// <param name="encoded">The residues.</param>
    /// <param name="values">Receives the values (same length).</param>
    public void Decode(ReadOnlySpan<ulong> encoded, Span<float> values)
    {
        CheckLengths(encoded.Length, values.Length);
        for (int i = 0; i < encoded.Length; i++)
        {
            values[i] = (float)Decode(encoded[i]);
        }
    }

    /// <summary>Decodes residues into double precision.</summary>
    /// <param name="encoded">The residues.</param>
    /// <param name="values">Receives the values (same length).</param>
    public void Decode(ReadOnlySpan<ulong> encoded, Span<double> values)
    {
        CheckLengths(encoded.Length, values.Length);
        for (int i = 0; i < encoded.Length; i++)
        {
            values[i] = Decode(encoded[i]);
        }
    }

    /// <summary>Adds <paramref name="addend"/> into <paramref name="accumulator"/> modulo 2^64, element by element.</summary>
    /// <param name="accumulator">The running sum (updated in place).</param>
    /// <param name="addend">The residues added (same length).</param>
    public static void AddWrapping(Span<ulong> accumulator, ReadOnlySpan<ulong> addend)
    {
        CheckLengths(addend.Length, accumulator.Length);
        for (int i = 0; i < accumulator.Length; i++)
        {
            accumulator[i] = unchecked(accumulator[i] + addend[i]);
        }
    }

    /// <summary>Subtracts <paramref name="subtrahend"/> from <paramref name="accumulator"/> modulo 2^64, element by element.</summary>
    /// <param name="accumulator">The running sum (updated in place).</param>
    /// <param name="subtrahend">The residues subtracted (same length).</param>
    public static void SubtractWrapping(Span<ulong> accumulator, ReadOnlySpan<ulong> subtrahend)
    {
        CheckLengths(subtrahend.Length, accumulator.Length);
        for (int i = 0; i < accumulator.Length; i++)
        {
            accumulator[i] = unchecked(accumulator[i] - subtrahend[i]);
        }
    }

    private ulong EncodeAt(double value, int index)
    {
        if (!(Math.Abs(value) <= MaxAbsValue))
        {
            throw new OverflowException($"fixed-point encoding: value [{index}] = {value:G9} is outside ±{MaxAbsValue:G6} (the bound the overflow check was made for)");
        }
        return unchecked((ulong)(long)Math.Round(value * _scale, MidpointRounding.ToEven));
    }

    private static void CheckLengths(int source, int target)
    {
        if (source != target)
        {
            throw new ArgumentException($"span lengths differ: {source} values, {target} slots");
        }
    }
}
