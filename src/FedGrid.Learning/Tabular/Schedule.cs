namespace FedGrid.Learning.Tabular;

/// <summary>A value that changes with a counter (a global step for ε, a state-action visit count for learning rates).</summary>
public abstract record Schedule
{
    /// <summary>The value after <paramref name="count"/> steps or visits (count ≥ 0).</summary>
    /// <param name="count">The counter.</param>
    /// <returns>The scheduled value.</returns>
    public abstract double ValueAt(long count);
}

/// <summary>A constant value.</summary>
/// <param name="Value">The value.</param>
public sealed record ConstantSchedule(double Value) : Schedule
{
    /// <inheritdoc />
    public override double ValueAt(long count) => Value;
}

/// <summary>Linear from <paramref name="Start"/> to <paramref name="End"/> over <paramref name="Steps"/> counts, then constant.</summary>
/// <param name="Start">Value at count 0.</param>
/// <param name="End">Value from count <paramref name="Steps"/> on.</param>
/// <param name="Steps">Length of the ramp (≥ 1).</param>
public sealed record LinearSchedule(double Start, double End, long Steps) : Schedule
{
    /// <inheritdoc />
    public override double ValueAt(long count) =>
        count >= Steps ? End : Start + (End - Start) * count / Math.Max(1, Steps);
}

/// <summary>Exponential decay End + (Start − End)·0.5^(count/HalfLife).</summary>
/// <param name="Start">Value at count 0.</param>
/// <param name="End">Asymptote.</param>
/// <param name="HalfLife">Counts for the excess over End to halve (&gt; 0).</param>
public sealed record ExponentialSchedule(double Start, double End, double HalfLife) : Schedule
{
    /// <inheritdoc />
    public override double ValueAt(long count) => End + (Start - End) * Math.Pow(0.5, count / HalfLife);
}

/// <summary>
/// Polynomial decay Scale/(1 + count)^Exponent. With a visit count and 0.5 &lt; Exponent ≤ 1 the step sizes satisfy
/// Σα = ∞, Σα² &lt; ∞, the Robbins–Monro conditions under which tabular Q-learning converges (Watkins &amp; Dayan 1992).
/// </summary>
/// <param name="Scale">Value at count 0.</param>
/// <param name="Exponent">Decay exponent.</param>
public sealed record PolynomialSchedule(double Scale, double Exponent) : Schedule
{
    /// <inheritdoc />
    public override double ValueAt(long count) => Scale / Math.Pow(1.0 + count, Exponent);
}
