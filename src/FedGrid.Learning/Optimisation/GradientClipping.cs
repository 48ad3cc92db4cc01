using System.Runtime.Intrinsics;

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
            Scale(gradient, (float)(maxNorm / norm));
        }
        return norm;
    }

    /// <summary>
    /// <see cref="ClipGlobalNorm(Span{float}, double)"/> for a gradient that is zero outside <paramref name="ranges"/>, at a
    /// cost proportional to their length. With the ranges in ascending order the norm is accumulated over the same
    /// non-zero terms in the same order (the skipped zeros add nothing), so the norm and the scaled gradient equal the
    /// full computation's bit for bit; the zeros outside stay zero.
    /// </summary>
    /// <param name="gradient">Gradient, scaled in place inside the ranges; zero outside them.</param>
    /// <param name="maxNorm">Largest allowed norm (&gt; 0).</param>
    /// <param name="ranges">(offset, length) ranges in ascending order, not overlapping.</param>
    /// <returns>The norm before clipping.</returns>
    public static double ClipGlobalNorm(Span<float> gradient, double maxNorm, ReadOnlySpan<(int Offset, int Length)> ranges)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(maxNorm);
        double sum = 0;
        int end = 0;
        foreach (var (o, n) in ranges)
        {
            if (o < end)
            {
                throw new ArgumentException("Gradient ranges must be in ascending order and must not overlap.", nameof(ranges));
            }
            end = o + n;
            sum = Networks.Kernels.SumOfSquares(gradient.Slice(o, n), sum);
        }
        double norm = Math.Sqrt(sum);
        if (norm > maxNorm)
        {
            float scale = (float)(maxNorm / norm);
            foreach (var (o, n) in ranges)
            {
                Scale(gradient.Slice(o, n), scale);
            }
        }
        return norm;
    }

    /// <summary>g ← scale·g element-wise (vectorised; each product is the same correctly rounded float as the scalar one).</summary>
    private static void Scale(Span<float> g, float scale)
    {
        int i = 0;
        Vector128<float> s = Vector128.Create(scale);
        for (; i <= g.Length - 4; i += 4)
        {
            (Vector128.Create((ReadOnlySpan<float>)g.Slice(i, 4)) * s).CopyTo(g.Slice(i, 4));
        }
        for (; i < g.Length; i++)
        {
            g[i] *= scale;
        }
    }
}
