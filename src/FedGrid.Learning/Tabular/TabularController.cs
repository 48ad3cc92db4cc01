using FedGrid.Learning.Tasks;

namespace FedGrid.Learning.Tabular;

/// <summary>
/// Runs a tabular baseline on an <see cref="IControlTask"/>: one independent learner per agent, each seeing only
/// its own state block through the discretiser and choosing a discrete action of its box. Learner m is seeded with
/// <c>DeriveSeed(options.Seed, m)</c>.
/// </summary>
public sealed class TabularController
{
    private readonly ITabularLearner[] _learners;
    private readonly int[] _states;
    private readonly int[] _actions;

    /// <summary>Creates the controller.</summary>
    /// <param name="agentCount">Number of agents M.</param>
    /// <param name="stateSizePerAgent">Features per agent's state block (the discretiser's dimensions).</param>
    /// <param name="discretiser">Discretiser of one agent's state block.</param>
    /// <param name="actionGrid">Discrete actions of one agent.</param>
    /// <param name="options">Learner settings.</param>
    /// <param name="doubleQ">Double Q-learning (true) or Q-learning (false).</param>
    public TabularController(int agentCount, int stateSizePerAgent, UniformDiscretiser discretiser, BoxActionGrid actionGrid,
        TabularOptions options, bool doubleQ)
    {
        ArgumentNullException.ThrowIfNull(discretiser);
        ArgumentNullException.ThrowIfNull(actionGrid);
        ArgumentNullException.ThrowIfNull(options);
        ArgumentOutOfRangeException.ThrowIfLessThan(agentCount, 1);
        if (discretiser.Dimensions != stateSizePerAgent)
        {
            throw new ArgumentException($"The discretiser has {discretiser.Dimensions} dimensions; the state block has {stateSizePerAgent}.", nameof(discretiser));
        }
        AgentCount = agentCount;
        StateSizePerAgent = stateSizePerAgent;
        Discretiser = discretiser;
        ActionGrid = actionGrid;
        _learners = new ITabularLearner[agentCount];
        for (int m = 0; m < agentCount; m++)
        {
            TabularOptions own = options with { Seed = Randomness.LearningRandom.DeriveSeed(options.Seed, (ulong)m) };
            _learners[m] = doubleQ
                ? new DoubleQLearner(discretiser.StateCount, actionGrid.Count, own)
                : new QLearner(discretiser.StateCount, actionGrid.Count, own);
        }
        _states = new int[agentCount];
        _actions = new int[agentCount];
    }

    /// <summary>Number of agents.</summary>
    public int AgentCount { get; }

    /// <summary>Features per agent's state block.</summary>
    public int StateSizePerAgent { get; }

    /// <summary>The state discretiser.</summary>
    public UniformDiscretiser Discretiser { get; }

    /// <summary>The action grid.</summary>
    public BoxActionGrid ActionGrid { get; }

    /// <summary>Agent m's learner.</summary>
    /// <param name="agent">Agent index.</param>
    /// <returns>The learner.</returns>
    public ITabularLearner Learner(int agent) => _learners[agent];

    /// <summary>Trains for <paramref name="episodes"/> episodes; episode e uses seed DeriveSeed(seed, e).</summary>
    /// <param name="task">The task.</param>
    /// <param name="episodes">Number of episodes.</param>
    /// <param name="seed">Seed of the episode seeds.</param>
    /// <param name="progress">Called after each episode with its index and result, or null.</param>
    /// <returns>The result of every episode, in order.</returns>
    public IReadOnlyList<EpisodeResult> Train(IControlTask task, int episodes, ulong seed, Action<int, EpisodeResult>? progress = null)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(episodes);
        var results = new List<EpisodeResult>(episodes);
        for (int e = 0; e < episodes; e++)
        {
            EpisodeResult r = RunEpisode(task, Randomness.LearningRandom.DeriveSeed(seed, (ulong)e), train: true);
            results.Add(r);
            progress?.Invoke(e, r);
        }
        return results;
    }

    /// <summary>Runs one episode; with <paramref name="train"/> acts ε-greedily and updates, otherwise acts greedily.</summary>
    /// <param name="task">The task (its action size must equal the grid's actions per agent).</param>
    /// <param name="seed">Episode seed.</param>
    /// <param name="train">Learn or evaluate.</param>
    /// <returns>Total cost and steps.</returns>
    public EpisodeResult RunEpisode(IControlTask task, ulong seed, bool train)
    {
        ArgumentNullException.ThrowIfNull(task);
        if (task.AgentCount != AgentCount || task.StateSizePerAgent != StateSizePerAgent || task.ActionSizePerAgent != ActionGrid.ActionsPerAgent)
        {
            throw new ArgumentException("The task's agent count, state size or action size differs from the controller's.", nameof(task));
        }
        int s = StateSizePerAgent, k = ActionGrid.ActionsPerAgent;
        float[] state = new float[AgentCount * s], lower = new float[AgentCount * k], upper = new float[AgentCount * k];
        float[] actions = new float[AgentCount * k], costs = new float[AgentCount];
        task.Reset(seed);
        task.Observe(state);
        for (int m = 0; m < AgentCount; m++)
        {
            _states[m] = Discretiser.Index(state.AsSpan(m * s, s));
        }
        double total = 0;
        int steps = 0, updates = 0;
        bool done = false;
        while (!done)
        {
            task.GetBounds(lower, upper);
            for (int m = 0; m < AgentCount; m++)
            {
                _actions[m] = train ? _learners[m].SelectAction(_states[m]) : _learners[m].GreedyAction(_states[m]);
                ActionGrid.Decode(_actions[m], lower.AsSpan(m * k, k), upper.AsSpan(m * k, k), actions.AsSpan(m * k, k));
            }
            done = task.Step(actions, costs);
            steps++;
            if (!done)
            {
                task.Observe(state);
            }
            for (int m = 0; m < AgentCount; m++)
            {
                total += costs[m];
                int next = done ? _states[m] : Discretiser.Index(state.AsSpan(m * s, s));
                if (train)
                {
                    _learners[m].Update(_states[m], _actions[m], costs[m], next, done);
                    updates++;
                }
                _states[m] = next;
            }
        }
        return new EpisodeResult(total, steps, updates);
    }
}
