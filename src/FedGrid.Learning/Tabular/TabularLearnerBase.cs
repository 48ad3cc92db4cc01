using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tabular;

/// <summary>
/// What the tabular learners share: the table dimensions, the step counter, the seeded random
/// stream and ε-greedy action selection on the learner's own <see cref="GreedyAction"/>.
/// </summary>
public abstract class TabularLearnerBase : ITabularLearner
{
    /// <summary>Checks the arguments and sets up the shared state.</summary>
    /// <param name="stateCount">Discrete states.</param>
    /// <param name="actionCount">Discrete actions.</param>
    /// <param name="options">Settings.</param>
    private protected TabularLearnerBase(int stateCount, int actionCount, TabularOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        ArgumentOutOfRangeException.ThrowIfLessThan(stateCount, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(actionCount, 1);
        StateCount = stateCount;
        ActionCount = actionCount;
        Options = options;
        Random = new LearningRandom(options.Seed);
    }

    /// <inheritdoc />
    public int StateCount { get; }

    /// <inheritdoc />
    public int ActionCount { get; }

    /// <inheritdoc />
    public long StepCount { get; private protected set; }

    private protected TabularOptions Options { get; }

    private protected LearningRandom Random { get; }

    /// <inheritdoc />
    public int SelectAction(int state)
    {
        double eps = Options.Epsilon.ValueAt(StepCount);
        return Random.NextDouble() < eps ? Random.NextInt(ActionCount) : GreedyAction(state);
    }

    /// <inheritdoc />
    public abstract int GreedyAction(int state);

    /// <inheritdoc />
    public abstract void Update(int state, int action, double cost, int nextState, bool terminal);

    /// <inheritdoc />
    public abstract double Q(int state, int action);

    /// <inheritdoc />
    public abstract double Value(int state);

    private protected void CheckState(int state)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(state);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(state, StateCount);
    }

    private protected int Index(int state, int action)
    {
        CheckState(state);
        ArgumentOutOfRangeException.ThrowIfNegative(action);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(action, ActionCount);
        return state * ActionCount + action;
    }
}
