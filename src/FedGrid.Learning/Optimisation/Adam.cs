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
        if (parameters.Length != _m.Length || gradient.Length != _m.Length)
        {
            throw new ArgumentException($"Adam was sized for {_m.Length} parameters.");
        }
        StepCount++;
        _beta1Power *= Beta1;
        _beta2Power *= Beta2;
        double c1 = 1.0 / (1.0 - _beta1Power), c2 = 1.0 / (1.0 - _beta2Power);
        double b1 = Beta1, b2 = Beta2, lr = LearningRate, eps = Epsilon;
        for (int i = 0; i < parameters.Length; i++)
        {
            double g = gradient[i];
            double m = _m[i] = b1 * _m[i] + (1 - b1) * g;
            double v = _v[i] = b2 * _v[i] + (1 - b2) * g * g;
            parameters[i] = (float)(parameters[i] - lr * (m * c1) / (Math.Sqrt(v * c2) + eps));
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
