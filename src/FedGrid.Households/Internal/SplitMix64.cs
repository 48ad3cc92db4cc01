namespace FedGrid.Households.Internal;

/// <summary>
/// Small seeded pseudo-random generator: SplitMix64 (Steele, Lea &amp; Flood 2014, the
/// generator Java's <c>SplittableRandom</c> uses). Deterministic across platforms, no allocation.
/// Kept internal here until the project has one shared seeded generator.
/// </summary>
internal struct SplitMix64
{
    private ulong _state;
    private double _spareGaussian;
    private bool _hasSpare;

    public SplitMix64(ulong seed)
    {
        _state = seed;
        _spareGaussian = 0;
        _hasSpare = false;
    }

    /// <summary>Mixes a seed with a stream number into an independent seed (used per household, per purpose).</summary>
    public static ulong Derive(ulong seed, ulong stream)
    {
        var g = new SplitMix64(seed ^ (0x9E3779B97F4A7C15UL * (stream + 1)));
        g.NextUInt64();
        return g.NextUInt64();
    }

    public ulong NextUInt64()
    {
        ulong z = _state += 0x9E3779B97F4A7C15UL;
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }

    /// <summary>Uniform on [0, 1) with 53 random bits.</summary>
    public double NextDouble() => (NextUInt64() >> 11) * (1.0 / (1UL << 53));

    /// <summary>Uniform on [lo, hi).</summary>
    public double Uniform(double lo, double hi) => lo + (hi - lo) * NextDouble();

    /// <summary>Uniform integer on [lo, hi) (hi &gt; lo).</summary>
    public int NextInt(int lo, int hi) => lo + (int)(NextDouble() * (hi - lo));

    /// <summary>True with probability <paramref name="p"/>.</summary>
    public bool Chance(double p) => NextDouble() < p;

    /// <summary>Standard normal by the Marsaglia polar method.</summary>
    public double NextGaussian()
    {
        if (_hasSpare)
        {
            _hasSpare = false;
            return _spareGaussian;
        }
        double u, v, s;
        do
        {
            u = 2 * NextDouble() - 1;
            v = 2 * NextDouble() - 1;
            s = u * u + v * v;
        } while (s >= 1 || s == 0);
        double f = Math.Sqrt(-2 * Math.Log(s) / s);
        _spareGaussian = v * f;
        _hasSpare = true;
        return u * f;
    }

    /// <summary>Exponential with the given mean.</summary>
    public double Exponential(double mean) => -mean * Math.Log(1 - NextDouble());
}
