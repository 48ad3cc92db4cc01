namespace FedGrid.Learning.Optimisation;

/// <summary>Gradient clipping by global L2 norm.</summary>
public static class GradientClipping
{
    /// <summary>L2 norm of a flat vector, accumulated in double precision.</summary>
    /// <param name="gradient">The vector.</param>
    /// <returns>‖g‖₂.</returns>
    public static double GlobalNorm(ReadOnlySpan<float> gradient) => Math.Sqrt(Networks.Kernels.SumOfSquares(gradient));

    /// <summary>
    /// Scales <paramref name="gradient"/> in place by min(1, maxNorm/‖g‖₂) so its global norm is at most
    /// <paramref name="maxNorm"/>; returns the norm before clipping.
    /// </summary>
    /// <param name="gradient">Gradient, scaled in place.</param>
    /// <param name="maxNorm">Largest allowed norm (&gt; 0).</param>
    /// <returns>The norm before clipping.</returns>
    public static double ClipGlobalNorm(Span<float> gradient, double maxNorm)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(maxNorm);
        double norm = GlobalNorm(gradient);
        if (norm > maxNorm)
        {
            float scale = (float)(maxNorm / norm);
            for (int i = 0; i < gradient.Length; i++)
            {
                gradient[i] *= scale;
            }
        }
        return norm;
    }
}
