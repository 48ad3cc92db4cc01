namespace FedGrid.Grid.Numerics;

/// <summary>
/// A small seeded pseudo-random generator whose sequence is fixed by this code alone, so that
/// a seed gives the same feeders, households and prices on every runtime and platform
/// (<see cref="System.Random"/> makes no such promise across .NET versions). The generator is
/// xoshiro256** (Blackman &amp; Vigna 2018), its 256-bit state filled from the 64-bit seed by
/// SplitMix64 (Steele, Lea &amp; Flood 2014). Not cryptographic; not thread-safe. Allocation-free
/// after construction.
/// </summary>
public sealed class SeededRandom
{
    private ulong _s0, _s1, _s2, _s3;

    /// <summary>Creates a generator from a seed; equal seeds give equal sequences.</summary>
    public SeededRandom(ulong seed)
    {
        ulong sm = seed;
        _s0 = SplitMix64(ref sm);
        _s1 = SplitMix64(ref sm);
        _s2 = SplitMix64(ref sm);
        _s3 = SplitMix64(ref sm);
    }

    /// <summary>A generator for one named sub-stream of a run: the same (seed, stream) pair always gives the same sequence, different streams are unrelated.</summary>
    public static SeededRandom ForStream(ulong seed, ulong stream)
    {
        ulong sm = seed ^ (stream * 0xD1B54A32D192ED03UL);
        return new SeededRandom(SplitMix64(ref sm));
    }

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

    /// <summary>A uniform double in [<paramref name="min"/>, <paramref name="max"/>).</summary>
    public double NextDouble(double min, double max) => min + (max - min) * NextDouble();

    /// <summary>A standard normal deviate (mean 0, variance 1), by the Box–Muller transform of two uniforms.</summary>
    public double NextGaussian()
    {
        double u1 = 1.0 - NextDouble(); // (0, 1]: keeps the logarithm finite
        double u2 = NextDouble();
        return Math.Sqrt(-2.0 * Math.Log(u1)) * Math.Cos(2.0 * Math.PI * u2);
    }

    /// <summary>A normal deviate with the given mean and standard deviation.</summary>
    public double NextGaussian(double mean, double standardDeviation) => mean + standardDeviation * NextGaussian();

    /// <summary>A uniform integer in [0, <paramref name="maxExclusive"/>), without modulo bias.</summary>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="maxExclusive"/> is not positive.</exception>
    public int NextInt(int maxExclusive)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(maxExclusive);
        return (int)NextBelow((ulong)maxExclusive);
    }

    /// <summary>A uniform integer in [<paramref name="minInclusive"/>, <paramref name="maxExclusive"/>).</summary>
    /// <exception cref="ArgumentOutOfRangeException">The range is empty.</exception>
    public int NextInt(int minInclusive, int maxExclusive)
    {
        if (maxExclusive <= minInclusive)
            throw new ArgumentOutOfRangeException(nameof(maxExclusive), $"empty range [{minInclusive}, {maxExclusive})");
        return (int)(minInclusive + (long)NextBelow((ulong)((long)maxExclusive - minInclusive)));
    }

    // Rejection sampling on the top bits: uniform in [0, n).
    private ulong NextBelow(ulong n)
    {
        ulong threshold = (0UL - n) % n; // 2^64 mod n
        while (true)
        {
            ulong r = NextUInt64();
            if (r >= threshold) return r % n;
        }
    }

    private static ulong SplitMix64(ref ulong state)
    {
        ulong z = state += 0x9E3779B97F4A7C15UL;
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }

    private static ulong RotateLeft(ulong x, int k) => (x << k) | (x >> (64 - k));
}
