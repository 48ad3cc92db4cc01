using FedGrid.Learning.ActorCritic;

namespace FedGrid.Federation.Protocol;

/// <summary>Which optimiser a household's local training uses.</summary>
public enum LocalOptimiser
{
    /// <summary>Adam (Kingma &amp; Ba 2015), moments reset after every broadcast.</summary>
    Adam,
    /// <summary>Plain stochastic gradient descent (used by the FedAvg identity checks).</summary>
    Sgd,
}

/// <summary>
/// How a household trains on its own transitions at a round's end. Transitions are taken in time order in windows of
/// <see cref="ActorCriticOptions.RolloutSteps"/> (n-step returns bootstrapped by the household's own critic head, the
/// same rule as <see cref="ActorCriticLearner"/>), one optimiser step per window, for <see cref="Epochs"/> passes.
/// </summary>
public sealed record LocalTrainingOptions
{
    /// <summary>Passes over the round's transitions.</summary>
    public int Epochs { get; init; } = 1;

    /// <summary>Optimiser of the local steps.</summary>
    public LocalOptimiser Optimiser { get; init; } = LocalOptimiser.Adam;

    /// <summary>One window holding every transition of the round (one full-batch step per epoch).</summary>
    public bool FullBatch { get; init; }

    internal void Validate()
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(Epochs, 1, nameof(Epochs));
    }
}

/// <summary>Settings of one federated run, shared by the coordinator and (in <see cref="Wire.JoinAccepted"/>) the households.</summary>
public sealed record FederationOptions
{
    /// <summary>Network shapes, learning rates, discount and the seed of the run (the coordinator's initial model and selections derive from <see cref="ActorCriticOptions.Seed"/>).</summary>
    public ActorCriticOptions Learning { get; init; } = new();

    /// <summary>Local training at round ends.</summary>
    public LocalTrainingOptions LocalTraining { get; init; } = new();

    /// <summary>Decision steps per round (96 = one simulated day of 15-minute slots).</summary>
    public int StepsPerRound { get; init; } = 96;

    /// <summary>Fraction of the households called to train each round, in (0, 1]; the selection is drawn from the seed.</summary>
    public double Participation { get; init; } = 1.0;

    /// <summary>Fewest uploads with which a round is aggregated; below it the round is recorded as failed and the model kept.</summary>
    public int MinQuorum { get; init; } = 1;

    internal void Validate(int householdCount)
    {
        ArgumentNullException.ThrowIfNull(Learning);
        ArgumentNullException.ThrowIfNull(LocalTraining);
        LocalTraining.Validate();
        ArgumentOutOfRangeException.ThrowIfLessThan(StepsPerRound, 1, nameof(StepsPerRound));
        if (!(Participation > 0 && Participation <= 1))
        {
            throw new ArgumentOutOfRangeException(nameof(Participation), Participation, "participation must lie in (0, 1]");
        }
        if (MinQuorum < 1 || MinQuorum > householdCount)
        {
            throw new ArgumentOutOfRangeException(nameof(MinQuorum), MinQuorum, $"the quorum must lie in [1, {householdCount}] households");
        }
    }

    /// <summary>Households called to train per round: ⌈participation · M⌉ (at least one).</summary>
    /// <param name="householdCount">M.</param>
    /// <returns>The count.</returns>
    public int SelectedPerRound(int householdCount) => Math.Clamp((int)Math.Ceiling(Participation * householdCount - 1e-9), 1, householdCount);
}
