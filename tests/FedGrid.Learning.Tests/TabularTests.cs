using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tabular;

namespace FedGrid.Learning.Tests;

/// <summary>
/// Outside check: tabular Q-learning (Watkins 1992) and double Q-learning (van Hasselt 2010) on a small MDP whose
/// solution is computed here, independently, by value iteration (Bellman 1957; Sutton &amp; Barto 2018, §4.4).
/// </summary>
public sealed class TabularTests(Xunit.Abstractions.ITestOutputHelper log)
{
    // 5-state chain. Action 0 ("left"): to s−1 with p 0.9, else stay. Action 1 ("right"): to s+1 with p 0.8, else stay.
    // Ends clamp (moving off an end stays). Cost c(s, a) = 0.5·(4 − s) + 0.2·a: far from state 4 is expensive, moving right
    // costs a little extra. γ = 0.8.
    private const int States = 5, Actions = 2;
    private const double Gamma = 0.8;

    private static double Cost(int s, int a) => 0.5 * (4 - s) + 0.2 * a;

    private static (int Next, double P)[] Transitions(int s, int a) => a == 0
        ? [(Math.Max(0, s - 1), 0.9), (s, 0.1)]
        : [(Math.Min(States - 1, s + 1), 0.8), (s, 0.2)];

    private static double[,] ValueIteration()
    {
        var q = new double[States, Actions];
        for (int sweep = 0; sweep < 2000; sweep++)
        {
            var next = new double[States, Actions];
            for (int s = 0; s < States; s++)
            {
                for (int a = 0; a < Actions; a++)
                {
                    double v = Cost(s, a);
                    foreach ((int sn, double p) in Transitions(s, a))
                    {
                        v += Gamma * p * Math.Min(q[sn, 0], q[sn, 1]);
                    }
                    next[s, a] = v;
                }
            }
            q = next;
        }
        return q;
    }

    private static void Run(ITabularLearner learner, int steps, ulong seed)
    {
        var env = new LearningRandom(seed);
        int s = 0;
        for (int t = 0; t < steps; t++)
        {
            int a = learner.SelectAction(s);
            (int Next, double P)[] tr = Transitions(s, a);
            int sn = env.NextDouble() < tr[0].P ? tr[0].Next : tr[1].Next;
            learner.Update(s, a, Cost(s, a), sn, terminal: false);
            s = sn;
        }
    }

    private static readonly TabularOptions Options = new()
    {
        Gamma = Gamma,
        Epsilon = new ConstantSchedule(1.0),                   // behave at random; Q-learning is off-policy
        LearningRate = new PolynomialSchedule(1.0, 0.7),
        Seed = 3,
    };

    [Fact]
    public void ValueIterationSolutionIsSane()
    {
        double[,] q = ValueIteration();
        // In state 4 staying (left costs less and returns with p 0.9): cost 0 now; Q*(4, right) = 0.2 + γ·V(4).
        Assert.True(q[0, 1] < q[0, 0]); // going right pays off from the far end
        Assert.Equal(0.2 + Gamma * Math.Min(q[4, 0], q[4, 1]), q[4, 1], 1e-9);
    }

    [Fact]
    public void QLearningConvergesToTheValueIterationSolution()
    {
        double[,] reference = ValueIteration();
        var learner = new QLearner(States, Actions, Options);
        Run(learner, 10_000_000, 11);
        for (int s = 0; s < States; s++)
        {
            for (int a = 0; a < Actions; a++)
            {
                log.WriteLine($"{learner.GetType().Name} Q({s},{a}) err {learner.Q(s, a) - reference[s, a]:E2}");
                Assert.True(Math.Abs(learner.Q(s, a) - reference[s, a]) < 1e-2, $"Q({s},{a}) = {learner.Q(s, a):F4}, value iteration {reference[s, a]:F4}");
            }
            Assert.Equal(reference[s, 0] <= reference[s, 1] ? 0 : 1, learner.GreedyAction(s));
            Assert.Equal(Math.Min(reference[s, 0], reference[s, 1]), learner.Value(s), 1e-2);
        }
    }

    [Fact]
    public void DoubleQLearningConvergesToTheValueIterationSolution()
    {
        double[,] reference = ValueIteration();
        var learner = new DoubleQLearner(States, Actions, Options);
        Run(learner, 10_000_000, 12);
        for (int s = 0; s < States; s++)
        {
            for (int a = 0; a < Actions; a++)
            {
                log.WriteLine($"{learner.GetType().Name} Q({s},{a}) err {learner.Q(s, a) - reference[s, a]:E2}");
                Assert.True(Math.Abs(learner.Q(s, a) - reference[s, a]) < 1e-2, $"Q({s},{a}) = {learner.Q(s, a):F4}, value iteration {reference[s, a]:F4}");
            }
            Assert.Equal(Math.Min(reference[s, 0], reference[s, 1]), learner.Value(s), 1e-2);
        }
    }

    [Fact]
    public void LearnersAreDeterministicForASeed()
    {
        var a = new QLearner(States, Actions, Options);
        var b = new QLearner(States, Actions, Options);
        Run(a, 5000, 1);
        Run(b, 5000, 1);
        for (int s = 0; s < States; s++)
        {
            Assert.Equal(a.Q(s, 0), b.Q(s, 0));
            Assert.Equal(a.Q(s, 1), b.Q(s, 1));
        }
    }

    [Fact]
    public void EpsilonGreedyFollowsItsSchedule()
    {
        var greedy = new QLearner(1, 4, Options with { Epsilon = new ConstantSchedule(0.0), InitialValue = 0 });
        greedy.Update(0, 2, -1.0, 0, terminal: true); // action 2 now cheapest
        for (int i = 0; i < 100; i++)
        {
            Assert.Equal(2, greedy.SelectAction(0));
        }
        var random = new QLearner(1, 4, Options with { Epsilon = new ConstantSchedule(1.0) });
        var seen = new HashSet<int>();
        for (int i = 0; i < 200; i++)
        {
            seen.Add(random.SelectAction(0));
        }
        Assert.Equal(4, seen.Count);
    }

    [Fact]
    public void SchedulesGiveTheirFormulas()
    {
        Assert.Equal(0.7, new ConstantSchedule(0.7).ValueAt(12345));
        var lin = new LinearSchedule(1.0, 0.1, 100);
        Assert.Equal(1.0, lin.ValueAt(0));
        Assert.Equal(0.55, lin.ValueAt(50), 1e-12);
        Assert.Equal(0.1, lin.ValueAt(1000));
        var exp = new ExponentialSchedule(1.0, 0.0, 10);
        Assert.Equal(0.5, exp.ValueAt(10), 1e-12);
        var poly = new PolynomialSchedule(1.0, 1.0);
        Assert.Equal(1.0, poly.ValueAt(0));
        Assert.Equal(0.25, poly.ValueAt(3), 1e-12);
    }

    [Fact]
    public void DiscretiserAndActionGridMapAsDocumented()
    {
        var d = new UniformDiscretiser([0f, -1f], [1f, 1f], [4, 2]);
        Assert.Equal(8, d.StateCount);
        Assert.Equal(0, d.Index([0f, -1f]));
        Assert.Equal(3, d.Index([0.99f, -0.5f]));      // cell 3 in dim 0, cell 0 in dim 1
        Assert.Equal(3 + 4, d.Index([5f, 0.5f]));      // clamped to the last cell, cell 1 in dim 1
        Assert.Equal(1 + 4, d.Index([0.25f, 1f]));     // exactly on a boundary falls in the upper cell; hi end in last cell
        Assert.Throws<ArgumentException>(() => new UniformDiscretiser([1f], [1f], [3]));

        var grid = new BoxActionGrid(5, 2);
        Assert.Equal(25, grid.Count);
        float[] a = new float[2];
        grid.Decode(4 + 5 * 2, [0f, 10f], [2f, 20f], a); // level 4 of 5 for action 0, level 2 for action 1
        Assert.Equal(2f, a[0]);
        Assert.Equal(15f, a[1]);
        var single = new BoxActionGrid(1);
        float[] mid = new float[1];
        single.Decode(0, [1f], [3f], mid);
        Assert.Equal(2f, mid[0]);
    }
}
