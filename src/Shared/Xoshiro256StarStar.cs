namespace FedGrid.Shared;

/// <summary>
/// The one implementation of the project's seeded bit generator: xoshiro256** (Blackman &amp; Vigna 2018), its 256-bit
/// state filled from a 64-bit seed by SplitMix64 (Steele, Lea &amp; Flood 2014). The same seed gives the same stream on
/// every runtime and platform (<see cref="System.Random"/> makes no such promise across .NET versions). Not
/// cryptographic; not thread-safe; allocation-free. This file is compiled into each gateway-side layer that needs it
/// (FedGrid.Grid's <c>SeededRandom</c>, FedGrid.Learning's <c>LearningRandom</c>), which may not reference each other;
/// the public generators add their distributions on top.
/// </summary>
internal struct Xoshiro256StarStar
{
    private ulong _s0, _s1, _s2, _s3;

    /// <summary>A generator whose whole state is derived from <paramref name="seed"/>; equal seeds give equal streams.</summary>
    public Xoshiro256StarStar(ulong seed)
    {
        ulong x = seed;
        _s0 = SplitMix64(ref x);
        _s1 = SplitMix64(ref x);
        _s2 = SplitMix64(ref x);
        _s3 = SplitMix64(ref x);
    }

    /// <summary>One step of SplitMix64: advances <paramref name="state"/> and returns the mixed output.</summary>
    public static ulong SplitMix64(ref ulong state)
    {
        ulong z = state += 0x9E3779B97F4A7C15UL;
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }

    /// <summary>The parent seed and a stream number combined, before mixing (one sub-stream per agent, per purpose).</summary>
    public static ulong StreamKey(ulong seed, ulong stream) => seed ^ (stream * 0xD1B54A32D192ED03UL);

    /// <summary>The next 64 uniformly distributed bits.</summary>
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

    /// <summary>A uniform double in [0, 1) with 53 random bits.</summary>
    public double NextDouble() => (NextUInt64() >> 11) * (1.0 / (1UL << 53));

    /// <summary>Writes the 256-bit state (for a checkpoint).</summary>
    public readonly void WriteState(BinaryWriter writer)
    {
        writer.Write(_s0);
        writer.Write(_s1);
        writer.Write(_s2);
        writer.Write(_s3);
    }

    /// <summary>Restores a state of <see cref="WriteState"/>: the stream continues exactly where it was.</summary>
    public void ReadState(BinaryReader reader)
    {
        _s0 = reader.ReadUInt64();
        _s1 = reader.ReadUInt64();
        _s2 = reader.ReadUInt64();
        _s3 = reader.ReadUInt64();
    }

    private static ulong RotateLeft(ulong x, int k) => (x << k) | (x >> (64 - k));
}
