namespace FedGrid.Learning.Tabular;

/// <summary>
/// Tabular Q-learning (Watkins 1992) on costs: Q(s,a) ← Q(s,a) + α_n(s,a)·(c + γ·min_b Q(s',b) − Q(s,a)),
/// with α_n from <see cref="TabularOptions.LearningRate"/> at the pair's visit count n and ε-greedy exploration.
/// </summary>
public sealed class QLearner : TabularLearnerBase
{
    private readonly double[] _q;
    private readonly long[] _visits;

    /// <summary>Creates a learner with every Q-value at <see cref="TabularOptions.InitialValue"/>.</summary>
    /// <param name="stateCount">Discrete states.</param>
    /// <param name="actionCount">Discrete actions.</param>
    /// <param name="options">Settings.</param>
    public QLearner(int stateCount, int actionCount, TabularOptions options)
        : base(stateCount, actionCount, options)
    {
        _q = new double[checked(stateCount * actionCount)];
        Array.Fill(_q, options.InitialValue);
        _visits = new long[_q.Length];
    }

    /// <inheritdoc />
    public override int GreedyAction(int state) => TabularMath.ArgMin(Row(_q, state));

    /// <inheritdoc />
    public override void Update(int state, int action, double cost, int nextState, bool terminal)
    {
        int i = Index(state, action);
        double target = cost + (terminal ? 0 : Options.Gamma * TabularMath.Min(Row(_q, nextState)));
        double alpha = Options.LearningRate.ValueAt(_visits[i]++);
        _q[i] += alpha * (target - _q[i]);
        StepCount++;
    }

    /// <inheritdoc />
    public override double Q(int state, int action) => _q[Index(state, action)];

    /// <inheritdoc />
    public override double Value(int state) => TabularMath.Min(Row(_q, state));

    private ReadOnlySpan<double> Row(double[] table, int state)
    {
        CheckState(state);
        return table.AsSpan(state * ActionCount, ActionCount);
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
