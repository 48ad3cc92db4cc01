using FedGrid.Shared;

namespace FedGrid.Learning.Randomness;

/// <summary>
/// Small deterministic pseudo-random generator for the learners. The bits come from the project's one xoshiro256**
/// generator (<see cref="Xoshiro256StarStar"/>, shared with the data generators' <c>SeededRandom</c>); this class adds
/// the distributions the learners use (single-precision uniforms, Lemire integers, polar-method normals), whose streams
/// fix every learner's initial weights and exploration, and checkpoints of the whole state. The same seed gives the
/// same stream on every platform and runtime; it is not cryptographic.
/// </summary>
public sealed class LearningRandom
{
    private Xoshiro256StarStar _bits;
    private bool _hasSpareNormal;
    private double _spareNormal;

    /// <summary>Creates a generator whose whole state is derived from <paramref name="seed"/>.</summary>
    /// <param name="seed">Any 64-bit value; equal seeds give equal streams.</param>
    public LearningRandom(ulong seed) => _bits = new Xoshiro256StarStar(seed);

    /// <summary>Writes the generator's whole state (for a checkpoint).</summary>
    /// <param name="writer">Where to write.</param>
    public void WriteState(BinaryWriter writer)
    {
        ArgumentNullException.ThrowIfNull(writer);
        _bits.WriteState(writer);
        writer.Write(_hasSpareNormal);
        writer.Write(_spareNormal);
    }

    /// <summary>Restores a state of <see cref="WriteState"/>: the stream continues exactly where it was.</summary>
    /// <param name="reader">Where to read.</param>
    public void ReadState(BinaryReader reader)
    {
        ArgumentNullException.ThrowIfNull(reader);
        _bits.ReadState(reader);
        _hasSpareNormal = reader.ReadBoolean();
        _spareNormal = reader.ReadDouble();
    }

    /// <summary>One step of SplitMix64: advances <paramref name="state"/> and returns the mixed output.</summary>
    /// <param name="state">Generator state, advanced in place.</param>
    /// <returns>The next 64-bit output.</returns>
    public static ulong SplitMix64(ref ulong state) => Xoshiro256StarStar.SplitMix64(ref state);

    /// <summary>Derives an independent child seed from a parent seed and a stream number (e.g. one stream per agent).</summary>
    /// <param name="seed">Parent seed.</param>
    /// <param name="stream">Stream number.</param>
    /// <returns>A well-mixed seed for the child stream.</returns>
    public static ulong DeriveSeed(ulong seed, ulong stream)
    {
        ulong x = Xoshiro256StarStar.StreamKey(seed, stream);
        SplitMix64(ref x);
        return SplitMix64(ref x);
    }

    /// <summary>Next raw 64-bit output of xoshiro256**.</summary>
    /// <returns>A uniformly distributed 64-bit value.</returns>
    public ulong NextUInt64() => _bits.NextUInt64();

    /// <summary>Uniform double in [0, 1) with 53 random bits.</summary>
    /// <returns>A value in [0, 1).</returns>
    public double NextDouble() => _bits.NextDouble();

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
}
