namespace FedGrid.Learning.Tabular;

/// <summary>Settings of the tabular Q-learning baselines. Q-values are expected discounted costs (minimised).</summary>
public sealed record TabularOptions
{
    /// <summary>Discount factor γ in [0, 1).</summary>
    public double Gamma { get; init; } = 0.95;

    /// <summary>ε of the ε-greedy policy as a function of the learner's global step count.</summary>
    public Schedule Epsilon { get; init; } = new LinearSchedule(1.0, 0.05, 50_000);

    /// <summary>Learning rate as a function of the visit count of the state-action pair being updated.</summary>
    public Schedule LearningRate { get; init; } = new PolynomialSchedule(1.0, 0.8);

    /// <summary>Initial Q-value of every entry.</summary>
    public double InitialValue { get; init; }

    /// <summary>Seed of the exploration (and, for double Q-learning, of the table choice).</summary>
    public ulong Seed { get; init; } = 1;

    internal void Validate()
    {
        if (Gamma is < 0 or >= 1)
        {
            throw new ArgumentOutOfRangeException(nameof(Gamma), "γ must lie in [0, 1) for tabular learning.");
        }
        ArgumentNullException.ThrowIfNull(Epsilon);
        ArgumentNullException.ThrowIfNull(LearningRate);
    }
}
