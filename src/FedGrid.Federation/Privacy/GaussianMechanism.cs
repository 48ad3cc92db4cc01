using FedGrid.Grid.Numerics;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// The clipped Gaussian mechanism applied by a household to one vector before it leaves (a partial-sum vector or an
/// upload): scale the vector down to L2 norm at most C (<see cref="ClipNorm"/>), then add independent N(0, (z·C)²)
/// noise to every coordinate, z = <see cref="NoiseMultiplier"/>. The L2 sensitivity of one household's clipped
/// contribution is C, so z is the σ of the Rényi DP accountant (<see cref="RenyiDpAccountant"/>).
/// <para>
/// Noise is drawn from <see cref="SeededRandom"/> by the Box–Muller transform (one cosine deviate per pair of
/// uniforms): seeded so that runs are reproducible. This is a simulation: a deployment must seed from the operating
/// system's cryptographic generator, and floating-point noise has known weaknesses in the low-order bits
/// (Mironov 2012) that a production mechanism must address (e.g. by snapping to a grid).
/// </para>
/// </summary>
public sealed class GaussianMechanism
{
    private readonly SeededRandom _random;

    /// <summary>Creates the mechanism.</summary>
    /// <param name="clipNorm">C &gt; 0.</param>
    /// <param name="noiseMultiplier">z ≥ 0 (0: clipping only).</param>
    /// <param name="seed">Seed of the noise stream.</param>
    public GaussianMechanism(double clipNorm, double noiseMultiplier, ulong seed)
    {
        if (!(clipNorm > 0) || !double.IsFinite(clipNorm))
        {
            throw new ArgumentOutOfRangeException(nameof(clipNorm), clipNorm, "the clipping norm must be positive and finite");
        }
        if (!(noiseMultiplier >= 0) || !double.IsFinite(noiseMultiplier))
        {
            throw new ArgumentOutOfRangeException(nameof(noiseMultiplier), noiseMultiplier, "the noise multiplier must be non-negative and finite");
        }
        ClipNorm = clipNorm;
        NoiseMultiplier = noiseMultiplier;
        _random = new SeededRandom(seed);
    }

    /// <summary>C, the clipping norm (the L2 sensitivity).</summary>
    public double ClipNorm { get; }

    /// <summary>z, the noise multiplier.</summary>
    public double NoiseMultiplier { get; }

    /// <summary>Standard deviation of the noise per coordinate, z·C.</summary>
    public double NoiseStandardDeviation => NoiseMultiplier * ClipNorm;

    /// <summary>Clips and noises a vector in place.</summary>
    /// <param name="values">The vector.</param>
    /// <returns>Its L2 norm before clipping.</returns>
    public double Apply(Span<float> values)
    {
        double norm = ClipL2(values, ClipNorm);
        double sd = NoiseStandardDeviation;
        if (sd > 0)
        {
            for (int i = 0; i < values.Length; i++)
            {
                values[i] = (float)(values[i] + sd * _random.NextGaussian());
            }
        }
        return norm;
    }

    /// <summary>Clips and noises a vector in place.</summary>
    /// <param name="values">The vector.</param>
    /// <returns>Its L2 norm before clipping.</returns>
    public double Apply(Span<double> values)
    {
        double norm = ClipL2(values, ClipNorm);
        double sd = NoiseStandardDeviation;
        if (sd > 0)
        {
            for (int i = 0; i < values.Length; i++)
            {
                values[i] += sd * _random.NextGaussian();
            }
        }
        return norm;
    }

    /// <summary>Scales a vector by min(1, C/‖v‖₂) in place.</summary>
    /// <param name="values">The vector (finite).</param>
    /// <param name="clipNorm">C &gt; 0.</param>
    /// <returns>‖v‖₂ before clipping.</returns>
    /// <exception cref="ArgumentException">A non-finite value.</exception>
    public static double ClipL2(Span<float> values, double clipNorm)
    {
        double sq = 0;
        foreach (float v in values)
        {
            sq += (double)v * v;
        }
        double norm = Math.Sqrt(sq);
        if (!double.IsFinite(norm))
        {
            throw new ArgumentException("cannot clip a vector with non-finite values", nameof(values));
        }
        if (norm > clipNorm)
        {
            double scale = clipNorm / norm;
            for (int i = 0; i < values.Length; i++)
            {
                values[i] = (float)(values[i] * scale);
            }
        }
        return norm;
    }

    /// <summary>Scales a vector by min(1, C/‖v‖₂) in place.</summary>
    /// <param name="values">The vector (finite).</param>
    /// <param name="clipNorm">C &gt; 0.</param>
    /// <returns>‖v‖₂ before clipping.</returns>
    /// <exception cref="ArgumentException">A non-finite value.</exception>
    public static double ClipL2(Span<double> values, double clipNorm)
    {
        double sq = 0;
        foreach (double v in values)
        {
            sq += v * v;
        }
        double norm = Math.Sqrt(sq);
        if (!double.IsFinite(norm))
        {
            throw new ArgumentException("cannot clip a vector with non-finite values", nameof(values));
        }
        if (norm > clipNorm)
        {
            double scale = clipNorm / norm;
            for (int i = 0; i < values.Length; i++)
            {
                values[i] *= scale;
            }
        }
        return norm;
    }
}
