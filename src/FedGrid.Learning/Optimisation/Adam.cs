using System.Runtime.Intrinsics;

namespace FedGrid.Learning.Optimisation;

/// <summary>
/// Adam (Kingma &amp; Ba 2015, Algorithm 1): m ← β₁m + (1−β₁)g; v ← β₂v + (1−β₂)g²;
/// m̂ = m/(1−β₁ᵗ); v̂ = v/(1−β₂ᵗ); θ ← θ − α·m̂/(√v̂ + ε). Moments are kept in double precision.
/// </summary>
public sealed class Adam : IOptimiser
{
    private readonly double[] _m;
    private readonly double[] _v;
    private double _beta1Power = 1, _beta2Power = 1;

    /// <summary>Creates an Adam optimiser for <paramref name="parameterCount"/> parameters.</summary>
    /// <param name="parameterCount">Length of the parameter vector.</param>
    /// <param name="learningRate">Step size α.</param>
    /// <param name="beta1">First-moment decay β₁ (paper default 0.9).</param>
    /// <param name="beta2">Second-moment decay β₂ (paper default 0.999).</param>
    /// <param name="epsilon">ε (paper default 1e-8).</param>
    public Adam(int parameterCount, double learningRate = 1e-3, double beta1 = 0.9, double beta2 = 0.999, double epsilon = 1e-8)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(parameterCount, 1);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(learningRate);
        if (beta1 is < 0 or >= 1 || beta2 is < 0 or >= 1)
        {
            throw new ArgumentOutOfRangeException(nameof(beta1), "β₁ and β₂ must lie in [0, 1).");
        }
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(epsilon);
        _m = new double[parameterCount];
        _v = new double[parameterCount];
        LearningRate = learningRate;
        Beta1 = beta1;
        Beta2 = beta2;
        Epsilon = epsilon;
    }

    /// <summary>Step size α; may be changed between steps (schedules).</summary>
    public double LearningRate { get; set; }

    /// <summary>β₁.</summary>
    public double Beta1 { get; }

    /// <summary>β₂.</summary>
    public double Beta2 { get; }

    /// <summary>ε.</summary>
    public double Epsilon { get; }

    /// <inheritdoc />
    public int ParameterCount => _m.Length;

    /// <inheritdoc />
    public long StepCount { get; private set; }

    /// <inheritdoc />
    public void Step(Span<float> parameters, ReadOnlySpan<float> gradient)
    {
        CheckLengths(parameters, gradient);
        Advance(out double c1, out double c2);
        Update(parameters, gradient, 0, parameters.Length, c1, c2);
    }

    /// <inheritdoc />
    public void Step(Span<float> parameters, ReadOnlySpan<float> gradient, ReadOnlySpan<(int Offset, int Length)> ranges)
    {
        CheckLengths(parameters, gradient);
        OptimiserRanges.Check(ranges, _m.Length);
        Advance(out double c1, out double c2);
        foreach (var (o, n) in ranges)
        {
            Update(parameters, gradient, o, n, c1, c2);
        }
    }

    private void CheckLengths(Span<float> parameters, ReadOnlySpan<float> gradient)
    {
        if (parameters.Length != _m.Length || gradient.Length != _m.Length)
        {
            throw new ArgumentException($"Adam was sized for {_m.Length} parameters.");
        }
    }

    private void Advance(out double c1, out double c2)
    {
        StepCount++;
        _beta1Power *= Beta1;
        _beta2Power *= Beta2;
        c1 = 1.0 / (1.0 - _beta1Power);
        c2 = 1.0 / (1.0 - _beta2Power);
    }

    private void Update(Span<float> parameters, ReadOnlySpan<float> gradient, int offset, int length, double c1, double c2)
    {
        double b1 = Beta1, b2 = Beta2, lr = LearningRate, eps = Epsilon;
        Span<float> p = parameters.Slice(offset, length);
        ReadOnlySpan<float> gs = gradient.Slice(offset, length);
        Span<double> ms = _m.AsSpan(offset, length), vs = _v.AsSpan(offset, length);
        int i = 0;
        if (Vector256.IsHardwareAccelerated)
        {
            // Element-wise, the same operations in the same order as the scalar loop below (IEEE multiply, add, divide and
            // square root are correctly rounded in either form; no fused multiply-add), so the result is the same bit for bit.
            Vector256<double> vb1 = Vector256.Create(b1), vb1c = Vector256.Create(1 - b1), vb2 = Vector256.Create(b2), vb2c = Vector256.Create(1 - b2);
            Vector256<double> vlr = Vector256.Create(lr), vc1 = Vector256.Create(c1), vc2 = Vector256.Create(c2), veps = Vector256.Create(eps);
            for (; i <= p.Length - 8; i += 8)
            {
                var (g0, g1) = Vector256.Widen(Vector256.Create(gs.Slice(i, 8)));
                var (p0, p1) = Vector256.Widen(Vector256.Create((ReadOnlySpan<float>)p.Slice(i, 8)));
                Vector256<double> m0 = vb1 * Vector256.Create((ReadOnlySpan<double>)ms.Slice(i, 4)) + vb1c * g0;
                Vector256<double> m1 = vb1 * Vector256.Create((ReadOnlySpan<double>)ms.Slice(i + 4, 4)) + vb1c * g1;
                Vector256<double> v0 = vb2 * Vector256.Create((ReadOnlySpan<double>)vs.Slice(i, 4)) + vb2c * g0 * g0;
                Vector256<double> v1 = vb2 * Vector256.Create((ReadOnlySpan<double>)vs.Slice(i + 4, 4)) + vb2c * g1 * g1;
                m0.CopyTo(ms.Slice(i, 4));
                m1.CopyTo(ms.Slice(i + 4, 4));
                v0.CopyTo(vs.Slice(i, 4));
                v1.CopyTo(vs.Slice(i + 4, 4));
                p0 -= vlr * (m0 * vc1) / (Vector256.Sqrt(v0 * vc2) + veps);
                p1 -= vlr * (m1 * vc1) / (Vector256.Sqrt(v1 * vc2) + veps);
                Vector256.Narrow(p0, p1).CopyTo(p.Slice(i, 8));
            }
        }
        for (; i < p.Length; i++)
        {
            double g = gs[i];
            double m = ms[i] = b1 * ms[i] + (1 - b1) * g;
            double v = vs[i] = b2 * vs[i] + (1 - b2) * g * g;
            p[i] = (float)(p[i] - lr * (m * c1) / (Math.Sqrt(v * c2) + eps));
        }
    }

    /// <inheritdoc />
    public void Reset()
    {
        Array.Clear(_m);
        Array.Clear(_v);
        _beta1Power = _beta2Power = 1;
        StepCount = 0;
    }
}
