using FedGrid.Learning.Networks;

namespace FedGrid.Learning.ActorCritic;

/// <summary>Settings of the advantage actor-critic learner. The defaults are common practice for small continuous-control tasks.</summary>
public sealed record ActorCriticOptions
{
    /// <summary>Hidden layer sizes of both the actor and the critic (the first one is the split layer).</summary>
    public IReadOnlyList<int> HiddenSizes { get; init; } = [64, 64];

    /// <summary>Hidden activation of both networks.</summary>
    public Activation HiddenActivation { get; init; } = Activation.Tanh;

    /// <summary>Discount factor γ of the cost, in [0, 1].</summary>
    public double Gamma { get; init; } = 0.99;

    /// <summary>Adam step size of the actor.</summary>
    public double ActorLearningRate { get; init; } = 3e-4;

    /// <summary>Adam step size of the critic.</summary>
    public double CriticLearningRate { get; init; } = 1e-3;

    /// <summary>Weight β of the entropy bonus (the pre-squash Gaussian's entropy is maximised with this weight).</summary>
    public double EntropyCoefficient { get; init; } = 1e-3;

    /// <summary>Steps per update; the advantage is the n-step TD advantage with n up to this (1 = one-step TD).</summary>
    public int RolloutSteps { get; init; } = 8;

    /// <summary>Global L2 norm to which each network's gradient is clipped before the optimiser step.</summary>
    public double MaxGradientNorm { get; init; } = 1.0;

    /// <summary>Smallest log σ of the pre-squash Gaussian.</summary>
    public float LogStdMin { get; init; } = -4f;

    /// <summary>Largest log σ of the pre-squash Gaussian.</summary>
    public float LogStdMax { get; init; } = 1f;

    /// <summary>Factor applied to every cost before learning (reward = −CostScale · cost); keeps returns near unit scale.</summary>
    public double CostScale { get; init; } = 1.0;

    /// <summary>Factor on the output layers' initial weights (small: the policy starts near the middle of its box).</summary>
    public float InitialOutputScale { get; init; } = 0.1f;

    /// <summary>
    /// λ of the generalised advantage estimate over a rollout (1 = the n-step return minus the critic's value, the
    /// plain A2C advantage; 0 = the one-step TD error). The critic's target is advantage + value.
    /// </summary>
    public double GaeLambda { get; init; } = 1.0;

    /// <summary>
    /// Passes over each rollout per update (1 = plain A2C). With more than one, later passes weight each head's
    /// log-probability gradient by the probability ratio new/old policy of the stored action.
    /// </summary>
    public int UpdateEpochs { get; init; } = 1;

    /// <summary>
    /// ε of the clipped surrogate objective (PPO-style): a head's term stops contributing once its ratio leaves
    /// [1 − ε, 1 + ε] in the direction that the advantage favours; 0 = no clipping.
    /// </summary>
    public double ClipRatio { get; init; }

    /// <summary>Normalise each rollout's advantages (all rows and agents) to mean 0, standard deviation 1 before the actor's update.</summary>
    public bool NormaliseAdvantages { get; init; }

    /// <summary>Seed of the initial weights and of the exploration noise.</summary>
    public ulong Seed { get; init; } = 1;

    internal void Validate()
    {
        if (HiddenSizes is null || HiddenSizes.Count == 0)
        {
            throw new ArgumentException("At least one hidden layer is needed.", nameof(HiddenSizes));
        }
        if (Gamma is < 0 or > 1)
        {
            throw new ArgumentOutOfRangeException(nameof(Gamma), "γ must lie in [0, 1].");
        }
        if (ActorLearningRate <= 0 || CriticLearningRate <= 0)
        {
            throw new ArgumentOutOfRangeException(nameof(ActorLearningRate), "Learning rates must be positive.");
        }
        if (EntropyCoefficient < 0)
        {
            throw new ArgumentOutOfRangeException(nameof(EntropyCoefficient), "The entropy weight must be non-negative.");
        }
        if (RolloutSteps < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(RolloutSteps), "At least one step per update.");
        }
        if (GaeLambda is < 0 or > 1)
        {
            throw new ArgumentOutOfRangeException(nameof(GaeLambda), "λ must lie in [0, 1].");
        }
        if (UpdateEpochs < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(UpdateEpochs), "At least one pass per update.");
        }
        if (ClipRatio is < 0 or >= 1)
        {
            throw new ArgumentOutOfRangeException(nameof(ClipRatio), "The clip ratio must lie in [0, 1).");
        }
        if (MaxGradientNorm <= 0 || CostScale <= 0)
        {
            throw new ArgumentOutOfRangeException(nameof(MaxGradientNorm), "Gradient norm limit and cost scale must be positive.");
        }
        if (!(LogStdMin < LogStdMax))
        {
            throw new ArgumentOutOfRangeException(nameof(LogStdMin), "LogStdMin must be below LogStdMax.");
        }
    }
}
