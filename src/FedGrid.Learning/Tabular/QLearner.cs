using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tabular;

/// <summary>
/// Tabular Q-learning (Watkins 1992) on costs: Q(s,a) ← Q(s,a) + α_n(s,a)·(c + γ·min_b Q(s',b) − Q(s,a)),
/// with α_n from <see cref="TabularOptions.LearningRate"/> at the pair's visit count n and ε-greedy exploration.
/// </summary>
public sealed class QLearner : ITabularLearner
{
    private readonly double[] _q;
    private readonly long[] _visits;
    private readonly TabularOptions _options;
    private readonly LearningRandom _random;

    /// <summary>Creates a learner with every Q-value at <see cref="TabularOptions.InitialValue"/>.</summary>
    /// <param name="stateCount">Discrete states.</param>
    /// <param name="actionCount">Discrete actions.</param>
    /// <param name="options">Settings.</param>
    public QLearner(int stateCount, int actionCount, TabularOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        ArgumentOutOfRangeException.ThrowIfLessThan(stateCount, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(actionCount, 1);
        StateCount = stateCount;
        ActionCount = actionCount;
        _options = options;
        _q = new double[checked(stateCount * actionCount)];
        Array.Fill(_q, options.InitialValue);
        _visits = new long[_q.Length];
        _random = new LearningRandom(options.Seed);
    }

    /// <inheritdoc />
    public int StateCount { get; }

    /// <inheritdoc />
    public int ActionCount { get; }

    /// <inheritdoc />
    public long StepCount { get; private set; }

    /// <inheritdoc />
    public int SelectAction(int state)
    {
        double eps = _options.Epsilon.ValueAt(StepCount);
        return _random.NextDouble() < eps ? _random.NextInt(ActionCount) : GreedyAction(state);
    }

    /// <inheritdoc />
    public int GreedyAction(int state) => TabularMath.ArgMin(Row(_q, state));

    /// <inheritdoc />
    public void Update(int state, int action, double cost, int nextState, bool terminal)
    {
        int i = Index(state, action);
        double target = cost + (terminal ? 0 : _options.Gamma * TabularMath.Min(Row(_q, nextState)));
        double alpha = _options.LearningRate.ValueAt(_visits[i]++);
        _q[i] += alpha * (target - _q[i]);
        StepCount++;
    }

    /// <inheritdoc />
    public double Q(int state, int action) => _q[Index(state, action)];

    /// <inheritdoc />
    public double Value(int state) => TabularMath.Min(Row(_q, state));

    private ReadOnlySpan<double> Row(double[] table, int state)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(state);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(state, StateCount);
        return table.AsSpan(state * ActionCount, ActionCount);
    }

    private int Index(int state, int action)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(state);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(state, StateCount);
        ArgumentOutOfRangeException.ThrowIfNegative(action);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(action, ActionCount);
        return state * ActionCount + action;
    }
}

internal static class TabularMath
{
    public static int ArgMin(ReadOnlySpan<double> row)
    {
        int best = 0;
        for (int a = 1; a < row.Length; a++)
        {
            if (row[a] < row[best])
            {
                best = a;
            }
        }
        return best;
    }

    public static double Min(ReadOnlySpan<double> row) => row[ArgMin(row)];
}
