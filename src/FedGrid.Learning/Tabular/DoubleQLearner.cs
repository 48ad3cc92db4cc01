namespace FedGrid.Learning.Tabular;

/// <summary>
/// Double Q-learning (van Hasselt 2010) on costs: two tables A and B; each update picks one at random (½ each),
/// say A, and sets A(s,a) ← A(s,a) + α·(c + γ·B(s', argmin_b A(s',b)) − A(s,a)). Acting is ε-greedy on A + B.
/// Visit counts, and so learning rates, are kept per table.
/// </summary>
public sealed class DoubleQLearner : TabularLearnerBase
{
    private readonly double[] _a;
    private readonly double[] _b;
    private readonly long[] _visitsA;
    private readonly long[] _visitsB;

    /// <summary>Creates a learner with both tables at <see cref="TabularOptions.InitialValue"/>.</summary>
    /// <param name="stateCount">Discrete states.</param>
    /// <param name="actionCount">Discrete actions.</param>
    /// <param name="options">Settings.</param>
    public DoubleQLearner(int stateCount, int actionCount, TabularOptions options)
        : base(stateCount, actionCount, options)
    {
        int n = checked(stateCount * actionCount);
        _a = new double[n];
        _b = new double[n];
        Array.Fill(_a, options.InitialValue);
        Array.Fill(_b, options.InitialValue);
        _visitsA = new long[n];
        _visitsB = new long[n];
    }

    /// <inheritdoc />
    public override int GreedyAction(int state)
    {
        CheckState(state);
        int row = state * ActionCount, best = 0;
        for (int a = 1; a < ActionCount; a++)
        {
            if (_a[row + a] + _b[row + a] < _a[row + best] + _b[row + best])
            {
                best = a;
            }
        }
        return best;
    }

    /// <inheritdoc />
    public override void Update(int state, int action, double cost, int nextState, bool terminal)
    {
        int i = Index(state, action);
        bool updateA = Random.NextDouble() < 0.5;
        double[] own = updateA ? _a : _b, other = updateA ? _b : _a;
        long[] visits = updateA ? _visitsA : _visitsB;
        double target = cost;
        if (!terminal)
        {
            CheckState(nextState);
            int next = nextState * ActionCount;
            int best = TabularMath.ArgMin(own.AsSpan(next, ActionCount));
            target += Options.Gamma * other[next + best];
        }
        double alpha = Options.LearningRate.ValueAt(visits[i]++);
        own[i] += alpha * (target - own[i]);
        StepCount++;
    }

    /// <summary>The mean of the two tables, (A + B)/2.</summary>
    /// <param name="state">State index.</param>
    /// <param name="action">Action index.</param>
    /// <returns>The estimate.</returns>
    public override double Q(int state, int action)
    {
        int i = Index(state, action);
        return 0.5 * (_a[i] + _b[i]);
    }

    /// <inheritdoc />
    public override double Value(int state) => Q(state, GreedyAction(state));
}
