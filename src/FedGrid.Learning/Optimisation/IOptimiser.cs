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

    /// <summary>
    /// The same step restricted to the ranges where the gradient can be non-zero (e.g. a household's own columns and the
    /// shared layers of a split network), at a cost proportional to their length. Precondition: every gradient entry
    /// outside <paramref name="ranges"/> is zero in this step and has been in every step since the last
    /// <see cref="Reset"/>. Then the moments outside stay zero and the full <see cref="Step(Span{float}, ReadOnlySpan{float})"/>
    /// would leave those parameters unchanged, so both give the same parameters bit for bit. Allocates nothing.
    /// </summary>
    /// <param name="parameters">Parameters, updated in place inside the ranges.</param>
    /// <param name="gradient">Gradient of the loss, same layout, zero outside the ranges.</param>
    /// <param name="ranges">(offset, length) ranges, in any order, not overlapping.</param>
    void Step(Span<float> parameters, ReadOnlySpan<float> gradient, ReadOnlySpan<(int Offset, int Length)> ranges);

    /// <summary>Forgets moment estimates and the step count (e.g. after the federated layer replaces the parameters).</summary>
    void Reset();
}

/// <summary>Argument checks shared by the optimisers' ranged <see cref="IOptimiser.Step(Span{float}, ReadOnlySpan{float}, ReadOnlySpan{ValueTuple{int, int}})"/>.</summary>
internal static class OptimiserRanges
{
    /// <summary>Throws unless every (offset, length) range lies inside a vector of <paramref name="count"/> parameters.</summary>
    /// <param name="ranges">(offset, length) ranges.</param>
    /// <param name="count">Parameters the optimiser was sized for.</param>
    public static void Check(ReadOnlySpan<(int Offset, int Length)> ranges, int count)
    {
        foreach (var (o, n) in ranges)
        {
            ArgumentOutOfRangeException.ThrowIfNegative(o);
            ArgumentOutOfRangeException.ThrowIfNegative(n);
            ArgumentOutOfRangeException.ThrowIfGreaterThan(o + n, count);
        }
    }
}
