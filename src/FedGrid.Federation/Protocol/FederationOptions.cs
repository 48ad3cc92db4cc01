using FedGrid.Learning.ActorCritic;

namespace FedGrid.Federation.Protocol;

/// <summary>Which optimiser a household's local training uses.</summary>
public enum LocalOptimiser
{
    /// <summary>Adam (Kingma &amp; Ba 2015), moments reset after every broadcast unless <see cref="LocalTrainingOptions.KeepOptimiserState"/>.</summary>
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

    /// <summary>
    /// Keep the household's optimiser moments (and Adam's step count) across broadcasts instead of resetting them when a
    /// model arrives. The moments are the household's own state, never sent; the parameters they step are the broadcast
    /// ones. Off by default (each round starts with fresh moments); a household that keeps them cannot be checkpointed.
    /// </summary>
    public bool KeepOptimiserState { get; init; }

    /// <summary>How a household fits the demonstrated rows of a warm-start round (<see cref="FederationOptions.WarmStartSteps"/>).</summary>
    public LocalWarmStartOptions WarmStart { get; init; } = new();

    internal void Validate()
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(Epochs, 1, nameof(Epochs));
        ArgumentNullException.ThrowIfNull(WarmStart);
        WarmStart.Validate();
    }
}

/// <summary>
/// A household's local warm start at the end of a warm-start round: the rule of <see cref="ActorCriticLearner.WarmStart"/>
/// on the household's own demonstrated rows only, through the split first layer with the stored sums of the others (its
/// own actor head's means toward the cloned pre-squash targets, its own critic head toward the discounted returns of
/// its own costs), <see cref="Epochs"/> seeded shuffled passes in minibatches of <see cref="BatchSize"/> rows, one Adam
/// step of each network per minibatch. The defaults are the centralized warm start's (<see cref="Training.TrainingDefaults"/>).
/// </summary>
public sealed record LocalWarmStartOptions
{
    /// <summary>Passes over the round's demonstrated rows.</summary>
    public int Epochs { get; init; } = Training.TrainingDefaults.WarmStartEpochs;

    /// <summary>Rows per minibatch.</summary>
    public int BatchSize { get; init; } = Training.TrainingDefaults.WarmStartBatch;

    /// <summary>Adam step size of the warm start (the round's own optimisers are untouched).</summary>
    public double LearningRate { get; init; } = Training.TrainingDefaults.WarmStartLearningRate;

    /// <summary>Cap on |u*| of the cloned pre-squash targets (<see cref="ActorCriticLearner.CloneTarget"/>).</summary>
    public float Edge { get; init; } = Training.TrainingDefaults.WarmStartEdge;

    internal void Validate()
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(Epochs, 1, nameof(Epochs));
        ArgumentOutOfRangeException.ThrowIfLessThan(BatchSize, 1, nameof(BatchSize));
        if (!(LearningRate > 0) || !(Edge > 0))
        {
            throw new ArgumentOutOfRangeException(nameof(LearningRate), "the warm start's step size and edge must be positive");
        }
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

    /// <summary>
    /// Decision steps at the start of the run (a whole number of rounds) on which every household acts with a
    /// demonstrator rule of its own (the runner passes the rule's setpoint to <see cref="Households.HouseholdAgent.BeginStep"/>)
    /// instead of its policy, and fits its networks to those rows at the round's end (<see cref="LocalWarmStartOptions"/>)
    /// before it uploads as usual. The same messages cross as in any round. 0 (default): none.
    /// </summary>
    public int WarmStartSteps { get; init; }

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
        ArgumentOutOfRangeException.ThrowIfNegative(WarmStartSteps, nameof(WarmStartSteps));
        if (WarmStartSteps % StepsPerRound != 0)
        {
            throw new ArgumentOutOfRangeException(nameof(WarmStartSteps), WarmStartSteps, $"the warm start must cover whole rounds of {StepsPerRound} steps");
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
