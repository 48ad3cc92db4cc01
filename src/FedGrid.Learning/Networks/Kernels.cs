using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;
using System.Runtime.Intrinsics;

namespace FedGrid.Learning.Networks;

/// <summary>
/// The span kernels every layer is built from. They use fixed-width 128-bit vectors (4 floats) in a fixed
/// summation order, never fused multiply-add, so a result is bit-identical on x64 and arm64 whatever the
/// machine's widest vector is.
/// </summary>
internal static class Kernels
{
    /// <summary>Σ a[i]·b[i] over equal-length spans.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static float Dot(ReadOnlySpan<float> a, ReadOnlySpan<float> b)
    {
        int n = a.Length;
        if (b.Length != n)
        {
            throw new ArgumentException("Spans differ in length.", nameof(b));
        }
        ref float ra = ref MemoryMarshal.GetReference(a);
        ref float rb = ref MemoryMarshal.GetReference(b);
        int i = 0;
        float sum = 0f;
        if (n >= 8)
        {
            Vector128<float> acc0 = Vector128<float>.Zero, acc1 = Vector128<float>.Zero;
            for (; i <= n - 8; i += 8)
            {
                acc0 += Vector128.LoadUnsafe(ref ra, (nuint)i) * Vector128.LoadUnsafe(ref rb, (nuint)i);
                acc1 += Vector128.LoadUnsafe(ref ra, (nuint)(i + 4)) * Vector128.LoadUnsafe(ref rb, (nuint)(i + 4));
            }
            Vector128<float> acc = acc0 + acc1;
            sum = (acc.GetElement(0) + acc.GetElement(1)) + (acc.GetElement(2) + acc.GetElement(3));
        }
        for (; i < n; i++)
        {
            sum += Unsafe.Add(ref ra, i) * Unsafe.Add(ref rb, i);
        }
        return sum;
    }

    /// <summary>y[i] += alpha·x[i].</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static void Axpy(float alpha, ReadOnlySpan<float> x, Span<float> y)
    {
        int n = x.Length;
        if (y.Length != n)
        {
            throw new ArgumentException("Spans differ in length.", nameof(y));
        }
        ref float rx = ref MemoryMarshal.GetReference(x);
        ref float ry = ref MemoryMarshal.GetReference(y);
        int i = 0;
        if (n >= 4)
        {
            Vector128<float> va = Vector128.Create(alpha);
            for (; i <= n - 4; i += 4)
            {
                Vector128<float> r = Vector128.LoadUnsafe(ref ry, (nuint)i) + va * Vector128.LoadUnsafe(ref rx, (nuint)i);
                r.StoreUnsafe(ref ry, (nuint)i);
            }
        }
        for (; i < n; i++)
        {
            Unsafe.Add(ref ry, i) += alpha * Unsafe.Add(ref rx, i);
        }
    }

    /// <summary>Σ x[i]² in double precision (for norms).</summary>
    public static double SumOfSquares(ReadOnlySpan<float> x) => SumOfSquares(x, 0);

    /// <summary>s + Σ x[i]², accumulated in double precision in index order onto <paramref name="s"/> (so a vector's sum can be continued over several pieces exactly as over the whole).</summary>
    public static double SumOfSquares(ReadOnlySpan<float> x, double s)
    {
        for (int i = 0; i < x.Length; i++)
        {
            s += (double)x[i] * x[i];
        }
        return s;
    }
}
