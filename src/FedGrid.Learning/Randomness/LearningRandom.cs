namespace FedGrid.Learning.Randomness;

/// <summary>
/// Small deterministic pseudo-random generator for the learners: xoshiro256** (Blackman &amp; Vigna 2018)
/// seeded through SplitMix64 (Steele, Lea &amp; Flood 2014). The same seed gives the same stream on every
/// platform and runtime; it is not cryptographic.
/// </summary>
public sealed class LearningRandom
{
    private ulong _s0, _s1, _s2, _s3;
    private bool _hasSpareNormal;
    private double _spareNormal;

    /// <summary>Creates a generator whose whole state is derived from <paramref name="seed"/>.</summary>
    /// <param name="seed">Any 64-bit value; equal seeds give equal streams.</param>
    public LearningRandom(ulong seed)
    {
        ulong x = seed;
        _s0 = SplitMix64(ref x);
        _s1 = SplitMix64(ref x);
        _s2 = SplitMix64(ref x);
        _s3 = SplitMix64(ref x);
    }

    /// <summary>Writes the generator's whole state (for a checkpoint).</summary>
    /// <param name="writer">Where to write.</param>
    public void WriteState(BinaryWriter writer)
    {
        ArgumentNullException.ThrowIfNull(writer);
        writer.Write(_s0);
        writer.Write(_s1);
        writer.Write(_s2);
        writer.Write(_s3);
        writer.Write(_hasSpareNormal);
        writer.Write(_spareNormal);
    }

    /// <summary>Restores a state of <see cref="WriteState"/>: the stream continues exactly where it was.</summary>
    /// <param name="reader">Where to read.</param>
    public void ReadState(BinaryReader reader)
    {
        ArgumentNullException.ThrowIfNull(reader);
        _s0 = reader.ReadUInt64();
        _s1 = reader.ReadUInt64();
        _s2 = reader.ReadUInt64();
        _s3 = reader.ReadUInt64();
        _hasSpareNormal = reader.ReadBoolean();
        _spareNormal = reader.ReadDouble();
    }

    /// <summary>One step of SplitMix64: advances <paramref name="state"/> and returns the mixed output.</summary>
    /// <param name="state">Generator state, advanced in place.</param>
    /// <returns>The next 64-bit output.</returns>
    public static ulong SplitMix64(ref ulong state)
    {
        ulong z = state += 0x9E3779B97F4A7C15UL;
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }

    /// <summary>Derives an independent child seed from a parent seed and a stream number (e.g. one stream per agent).</summary>
    /// <param name="seed">Parent seed.</param>
    /// <param name="stream">Stream number.</param>
    /// <returns>A well-mixed seed for the child stream.</returns>
    public static ulong DeriveSeed(ulong seed, ulong stream)
    {
        ulong x = seed ^ (stream * 0xD1B54A32D192ED03UL);
        SplitMix64(ref x);
        return SplitMix64(ref x);
    }

    /// <summary>Next raw 64-bit output of xoshiro256**.</summary>
    /// <returns>A uniformly distributed 64-bit value.</returns>
    public ulong NextUInt64()
    {
        ulong result = RotateLeft(_s1 * 5, 7) * 9;
        ulong t = _s1 << 17;
        _s2 ^= _s0;
        _s3 ^= _s1;
        _s1 ^= _s2;
        _s0 ^= _s3;
        _s2 ^= t;
        _s3 = RotateLeft(_s3, 45);
        return result;
    }

    /// <summary>Uniform double in [0, 1) with 53 random bits.</summary>
    /// <returns>A value in [0, 1).</returns>
    public double NextDouble() => (NextUInt64() >> 11) * (1.0 / (1UL << 53));

    /// <summary>Uniform float in [0, 1) with 24 random bits.</summary>
    /// <returns>A value in [0, 1).</returns>
    public float NextSingle() => (NextUInt64() >> 40) * (1.0f / (1 << 24));

    /// <summary>Uniform float in [<paramref name="lo"/>, <paramref name="hi"/>).</summary>
    /// <param name="lo">Lower end.</param>
    /// <param name="hi">Upper end.</param>
    /// <returns>A value in [lo, hi).</returns>
    public float NextSingle(float lo, float hi) => lo + (hi - lo) * NextSingle();

    /// <summary>Uniform integer in [0, <paramref name="count"/>) without modulo bias (Lemire's method).</summary>
    /// <param name="count">Number of outcomes, at least 1.</param>
    /// <returns>A value in [0, count).</returns>
    public int NextInt(int count)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(count, 1);
        ulong bound = (ulong)count;
        ulong threshold = (0UL - bound) % bound;
        while (true)
        {
            ulong r = NextUInt64();
            UInt128 m = (UInt128)r * bound;
            if ((ulong)m >= threshold)
            {
                return (int)(m >> 64);
            }
        }
    }

    /// <summary>Standard normal variate (Marsaglia polar method; the second variate of each pair is kept for the next call).</summary>
    /// <returns>A draw from N(0, 1).</returns>
    public double NextGaussian()
    {
        if (_hasSpareNormal)
        {
            _hasSpareNormal = false;
            return _spareNormal;
        }
        double u, v, s;
        do
        {
            u = 2.0 * NextDouble() - 1.0;
            v = 2.0 * NextDouble() - 1.0;
            s = u * u + v * v;
        } while (s >= 1.0 || s == 0.0);
        double f = Math.Sqrt(-2.0 * Math.Log(s) / s);
        _spareNormal = v * f;
        _hasSpareNormal = true;
        return u * f;
    }

    private static ulong RotateLeft(ulong x, int k) => (x << k) | (x >> (64 - k));
}
