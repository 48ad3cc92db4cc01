namespace FedGrid.Learning.Optimisation;

/// <summary>Stochastic gradient descent with optional heavy-ball momentum: u ← μu + g; θ ← θ − α·u (plain SGD when μ = 0).</summary>
public sealed class Sgd : IOptimiser
{
    private readonly float[] _velocity;

    /// <summary>Creates an SGD optimiser.</summary>
    /// <param name="parameterCount">Length of the parameter vector.</param>
    /// <param name="learningRate">Step size α.</param>
    /// <param name="momentum">Momentum μ in [0, 1).</param>
    public Sgd(int parameterCount, double learningRate, double momentum = 0)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(parameterCount, 1);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(learningRate);
        if (momentum is < 0 or >= 1)
        {
            throw new ArgumentOutOfRangeException(nameof(momentum), "Momentum must lie in [0, 1).");
        }
        _velocity = new float[parameterCount];
        LearningRate = learningRate;
        Momentum = momentum;
    }

    /// <summary>Step size α; may be changed between steps.</summary>
    public double LearningRate { get; set; }

    /// <summary>Momentum μ.</summary>
    public double Momentum { get; }

    /// <inheritdoc />
    public int ParameterCount => _velocity.Length;

    /// <inheritdoc />
    public long StepCount { get; private set; }

    /// <inheritdoc />
    public void Step(Span<float> parameters, ReadOnlySpan<float> gradient)
    {
        CheckLengths(parameters, gradient);
        StepCount++;
        Update(parameters, gradient, 0, parameters.Length);
    }

    /// <inheritdoc />
    public void Step(Span<float> parameters, ReadOnlySpan<float> gradient, ReadOnlySpan<(int Offset, int Length)> ranges)
    {
        CheckLengths(parameters, gradient);
        OptimiserRanges.Check(ranges, _velocity.Length);
        StepCount++;
        foreach (var (o, n) in ranges)
        {
            Update(parameters, gradient, o, n);
        }
    }

    private void CheckLengths(Span<float> parameters, ReadOnlySpan<float> gradient)
    {
        if (parameters.Length != _velocity.Length || gradient.Length != _velocity.Length)
        {
            throw new ArgumentException($"SGD was sized for {_velocity.Length} parameters.");
        }
    }

    private void Update(Span<float> parameters, ReadOnlySpan<float> gradient, int offset, int length)
    {
        float lr = (float)LearningRate, mu = (float)Momentum;
        Span<float> p = parameters.Slice(offset, length), velocity = _velocity.AsSpan(offset, length);
        ReadOnlySpan<float> g = gradient.Slice(offset, length);
        for (int i = 0; i < p.Length; i++)
        {
            float u = velocity[i] = mu * velocity[i] + g[i];
            p[i] -= lr * u;
        }
    }

    /// <inheritdoc />
    public void Reset()
    {
        Array.Clear(_velocity);
        StepCount = 0;
    }
}
