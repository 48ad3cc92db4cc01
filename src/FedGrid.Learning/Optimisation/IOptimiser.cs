namespace FedGrid.Learning.Optimisation;

/// <summary>A first-order optimiser that updates a flat parameter vector in place from a flat gradient of a loss to minimise.</summary>
public interface IOptimiser
{
    /// <summary>Number of parameters the optimiser's state was sized for.</summary>
    int ParameterCount { get; }

    /// <summary>Number of steps taken so far.</summary>
    long StepCount { get; }

    /// <summary>One descent step: parameters ← update(parameters, gradient). Allocates nothing.</summary>
    /// <param name="parameters">Parameters, updated in place.</param>
    /// <param name="gradient">Gradient of the loss, same layout.</param>
    void Step(Span<float> parameters, ReadOnlySpan<float> gradient);

    /// <summary>Forgets moment estimates and the step count (e.g. after the federated layer replaces the parameters).</summary>
    void Reset();
}
