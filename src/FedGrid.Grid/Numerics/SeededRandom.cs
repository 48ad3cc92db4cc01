using FedGrid.Shared;

namespace FedGrid.Grid.Numerics;

/// <summary>
/// A small seeded pseudo-random generator whose sequence is fixed by this code alone, so that
/// a seed gives the same feeders, households and prices on every runtime and platform
/// (<see cref="System.Random"/> makes no such promise across .NET versions). The bits come from the
/// project's one xoshiro256** generator (<see cref="Xoshiro256StarStar"/>, shared with the learners'
/// <c>LearningRandom</c>); this class adds the distributions the data generators use (Box–Muller normals,
/// modulo-rejection integers), whose streams fix the default scenario. Not cryptographic; not thread-safe.
/// Allocation-free after construction.
/// </summary>
public sealed class SeededRandom
{
    private Xoshiro256StarStar _bits;

    /// <summary>Creates a generator from a seed; equal seeds give equal sequences.</summary>
    public SeededRandom(ulong seed) => _bits = new Xoshiro256StarStar(seed);

    /// <summary>A generator for one named sub-stream of a run: the same (seed, stream) pair always gives the same sequence, different streams are unrelated.</summary>
    public static SeededRandom ForStream(ulong seed, ulong stream)
    {
        ulong sm = Xoshiro256StarStar.StreamKey(seed, stream);
        return new SeededRandom(Xoshiro256StarStar.SplitMix64(ref sm));
    }

    /// <summary>The next 64 uniformly distributed bits.</summary>
    public ulong NextUInt64() => _bits.NextUInt64();

    /// <summary>A uniform double in [0, 1) with 53 random bits.</summary>
    public double NextDouble() => _bits.NextDouble();

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
}
