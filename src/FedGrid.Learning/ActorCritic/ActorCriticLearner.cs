using FedGrid.Learning.Networks;
using FedGrid.Learning.Optimisation;
using FedGrid.Learning.Policies;
using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tasks;

namespace FedGrid.Learning.ActorCritic;

/// <summary>
/// Advantage actor-critic (A2C) with a bounded squashed-Gaussian policy, trained on the discounted cost.
/// Both networks take every agent's state (agent-major concatenation; the first layer is split by agent).
/// The actor has one head per agent (k means and k raw log-stds); agent m acts with head m. The critic has one
/// value head per agent: V_m(s) estimates agent m's own discounted cost, so each agent's advantage is built from its
/// own cost (this is what a household can compute locally in the federated scheme). Updates use n-step TD
/// advantages over rollouts of <see cref="ActorCriticOptions.RolloutSteps"/> steps, bootstrapped by the critic.
/// </summary>
public sealed class ActorCriticLearner
{
    private readonly ActorCriticOptions _options;
    private readonly LearningRandom _random;
    private readonly Adam _actorOptimiser;
    private readonly Adam _criticOptimiser;
    private readonly NetworkWorkspace _actorWorkspace;
    private readonly NetworkWorkspace _criticWorkspace;
    private readonly NetworkWorkspace _decisionWorkspace;
    private readonly float[] _actorGradient;
    private readonly float[] _criticGradient;
    private readonly float[] _actorOutput;
    private readonly float[] _actorOutputGradient;
    private readonly float[] _values;
    private readonly float[] _valueGradient;
    private readonly float[] _returns;
    private readonly float[] _advantages;
    private readonly float[] _decisionOutput;
    private readonly float[] _decisionPreSquash;
    // Rollout storage (T = RolloutSteps rows).
    private readonly float[] _rolloutStates;
    private readonly float[] _rolloutPreSquash;
    private readonly float[] _rolloutCosts;
    private readonly float[] _rolloutLower;
    private readonly float[] _rolloutUpper;
    private readonly float[] _rolloutValues;
    private readonly float[] _rolloutAdvantages;
    private readonly float[] _rolloutTargets;
    private readonly float[] _rolloutOldLogProb;
    private readonly float[] _coefficients;
    private readonly float[] _bootstrapState;
    private readonly float[] _pendingState;
    private readonly float[] _pendingPreSquash;
    private readonly float[] _pendingLower;
    private readonly float[] _pendingUpper;
    private int _rolloutLength;
    private bool _hasPending;

    /// <summary>Creates a learner with seeded initial networks.</summary>
    /// <param name="agentCount">Number of agents M.</param>
    /// <param name="stateSizePerAgent">Features per agent's state block.</param>
    /// <param name="actionSizePerAgent">Actions per agent k.</param>
    /// <param name="options">Settings.</param>
    public ActorCriticLearner(int agentCount, int stateSizePerAgent, int actionSizePerAgent, ActorCriticOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        ArgumentOutOfRangeException.ThrowIfLessThan(agentCount, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(stateSizePerAgent, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(actionSizePerAgent, 1);
        _options = options;
        AgentCount = agentCount;
        StateSizePerAgent = stateSizePerAgent;
        ActionSizePerAgent = actionSizePerAgent;
        int k = actionSizePerAgent, m = agentCount;
        Actor = new DenseNetwork(NetworkShape.Uniform(m, stateSizePerAgent, options.HiddenSizes, 2 * k * m, options.HiddenActivation));
        Critic = new DenseNetwork(NetworkShape.Uniform(m, stateSizePerAgent, options.HiddenSizes, m, options.HiddenActivation));
        Actor.Initialise(LearningRandom.DeriveSeed(options.Seed, 1), options.InitialOutputScale);
        Critic.Initialise(LearningRandom.DeriveSeed(options.Seed, 2), options.InitialOutputScale);
        _random = new LearningRandom(LearningRandom.DeriveSeed(options.Seed, 3));
        _actorOptimiser = new Adam(Actor.ParameterCount, options.ActorLearningRate);
        _criticOptimiser = new Adam(Critic.ParameterCount, options.CriticLearningRate);
        _actorWorkspace = Actor.CreateWorkspace();
        _criticWorkspace = Critic.CreateWorkspace();
        _decisionWorkspace = Actor.CreateWorkspace();
        _actorGradient = new float[Actor.ParameterCount];
        _criticGradient = new float[Critic.ParameterCount];
        _actorOutput = new float[2 * k * m];
        _actorOutputGradient = new float[2 * k * m];
        _values = new float[m];
        _valueGradient = new float[m];
        _returns = new float[m];
        _advantages = new float[m];
        _decisionOutput = new float[2 * k * m];
        _decisionPreSquash = new float[k];
        int t = options.RolloutSteps, s = m * stateSizePerAgent;
        _rolloutStates = new float[t * s];
        _rolloutPreSquash = new float[t * m * k];
        _rolloutCosts = new float[t * m];
        _rolloutLower = new float[t * m * k];
        _rolloutUpper = new float[t * m * k];
        _rolloutValues = new float[t * m];
        _rolloutAdvantages = new float[t * m];
        _rolloutTargets = new float[t * m];
        _rolloutOldLogProb = new float[t * m];
        _coefficients = new float[m];
        _bootstrapState = new float[s];
        _pendingState = new float[s];
        _pendingPreSquash = new float[m * k];
        _pendingLower = new float[m * k];
        _pendingUpper = new float[m * k];
    }

    /// <summary>The policy network: input every agent's state, output (k means, k raw log-stds) per agent.</summary>
    public DenseNetwork Actor { get; }

    /// <summary>The value network: input every agent's state, output one discounted-cost estimate per agent.</summary>
    public DenseNetwork Critic { get; }

    /// <summary>The settings.</summary>
    public ActorCriticOptions Options => _options;

    /// <summary>Number of agents M.</summary>
    public int AgentCount { get; }

    /// <summary>Features per agent's state block.</summary>
    public int StateSizePerAgent { get; }

    /// <summary>Actions per agent k.</summary>
    public int ActionSizePerAgent { get; }

    /// <summary>Learning updates made so far.</summary>
    public long UpdateCount { get; private set; }

    /// <summary>Norm of the actor's gradient before clipping at the last update.</summary>
    public double LastActorGradientNorm { get; private set; }

    /// <summary>Norm of the critic's gradient before clipping at the last update.</summary>
    public double LastCriticGradientNorm { get; private set; }

    /// <summary>
    /// Chooses every agent's actions from the full state. With <paramref name="explore"/> the pre-squash value is
    /// sampled, otherwise it is the mean. The choice is remembered for the next <see cref="Record"/>.
    /// </summary>
    /// <param name="state">Full state (M·state size).</param>
    /// <param name="lower">Lower bounds (M·k).</param>
    /// <param name="upper">Upper bounds (M·k).</param>
    /// <param name="actions">Receives the actions (M·k), each inside its bounds.</param>
    /// <param name="explore">Sample (training) or act on the mean (evaluation).</param>
    public void Act(ReadOnlySpan<float> state, ReadOnlySpan<float> lower, ReadOnlySpan<float> upper, Span<float> actions, bool explore)
    {
        int n = AgentCount * ActionSizePerAgent;
        if (lower.Length != n || upper.Length != n || actions.Length != n)
        {
            throw new ArgumentException($"Bounds and actions need {n} floats each.");
        }
        Actor.Forward(state, _actorWorkspace, _actorOutput);
        int k = ActionSizePerAgent;
        for (int m = 0; m < AgentCount; m++)
        {
            SampleHead(_actorOutput.AsSpan(2 * k * m, 2 * k), lower.Slice(k * m, k), upper.Slice(k * m, k),
                actions.Slice(k * m, k), _pendingPreSquash.AsSpan(k * m, k), explore);
        }
        state.CopyTo(_pendingState);
        lower.CopyTo(_pendingLower);
        upper.CopyTo(_pendingUpper);
        _hasPending = true;
    }

    /// <summary>
    /// Stores the outcome of the last <see cref="Act"/>; when the rollout is full or the episode ended, makes one
    /// update of both networks.
    /// </summary>
    /// <param name="costs">Each agent's cost of the step (M).</param>
    /// <param name="nextState">The state after the step (ignored when <paramref name="done"/>).</param>
    /// <param name="done">Whether the episode ended with this step (no bootstrap beyond it).</param>
    /// <returns>True when an update was made.</returns>
    public bool Record(ReadOnlySpan<float> costs, ReadOnlySpan<float> nextState, bool done)
    {
        if (!_hasPending)
        {
            throw new InvalidOperationException("Record needs a preceding Act.");
        }
        if (costs.Length != AgentCount)
        {
            throw new ArgumentException($"Costs need {AgentCount} floats.", nameof(costs));
        }
        int s = _pendingState.Length, a = _pendingPreSquash.Length, t = _rolloutLength;
        _pendingState.CopyTo(_rolloutStates.AsSpan(t * s, s));
        _pendingPreSquash.CopyTo(_rolloutPreSquash.AsSpan(t * a, a));
        _pendingLower.CopyTo(_rolloutLower.AsSpan(t * a, a));
        _pendingUpper.CopyTo(_rolloutUpper.AsSpan(t * a, a));
        for (int m = 0; m < AgentCount; m++)
        {
            _rolloutCosts[t * AgentCount + m] = (float)(costs[m] * _options.CostScale);
        }
        _rolloutLength++;
        _hasPending = false;
        if (!done && _rolloutLength < _options.RolloutSteps)
        {
            return false;
        }
        if (!done)
        {
            nextState.CopyTo(_bootstrapState);
        }
        Update(done);
        return true;
    }

    /// <summary>
    /// Forgets both Adam optimisers' moment estimates and step counts, e.g. after the federated layer has replaced the
    /// parameters with an average (the old moments belong to the old parameters).
    /// </summary>
    public void ResetOptimisers()
    {
        _actorOptimiser.Reset();
        _criticOptimiser.Reset();
    }

    /// <summary>Discards a partly filled rollout (e.g. when an episode is cut short from outside).</summary>
    public void DiscardRollout()
    {
        _rolloutLength = 0;
        _hasPending = false;
    }

    /// <summary>Critic estimates of every agent's discounted (scaled) cost from the full state.</summary>
    /// <param name="state">Full state.</param>
    /// <param name="values">Receives M values.</param>
    public void Values(ReadOnlySpan<float> state, Span<float> values) => Critic.Forward(state, _criticWorkspace, values);

    /// <summary>Agent m's actor partial sums a_m = W_m x_m (what household m sends in the federated scheme).</summary>
    /// <param name="agent">Agent m.</param>
    /// <param name="ownState">x_m.</param>
    /// <param name="partialSums">Receives H₁ floats.</param>
    public void ActorPartialSums(int agent, ReadOnlySpan<float> ownState, Span<float> partialSums) =>
        Actor.PartialSums(agent, ownState, partialSums);

    /// <summary>
    /// One household's decision step: split forward of the actor with the agent's own state and the other agents'
    /// summed partial sums, then head m's actions inside [lower, upper]. Allocates nothing.
    /// </summary>
    /// <param name="agent">Agent m.</param>
    /// <param name="ownState">x_m.</param>
    /// <param name="otherPartialSums">Σ_{k≠m} a_k (H₁ floats).</param>
    /// <param name="lower">Agent m's lower bounds (k).</param>
    /// <param name="upper">Agent m's upper bounds (k).</param>
    /// <param name="actions">Receives agent m's actions (k).</param>
    /// <param name="explore">Sample or act on the mean.</param>
    public void DecideForAgent(int agent, ReadOnlySpan<float> ownState, ReadOnlySpan<float> otherPartialSums,
        ReadOnlySpan<float> lower, ReadOnlySpan<float> upper, Span<float> actions, bool explore)
    {
        int k = ActionSizePerAgent;
        if (lower.Length != k || upper.Length != k || actions.Length != k)
        {
            throw new ArgumentException($"Bounds and actions need {k} floats each.");
        }
        Actor.ForwardSplit(agent, ownState, otherPartialSums, _decisionWorkspace, _decisionOutput);
        SampleHead(_decisionOutput.AsSpan(2 * k * agent, 2 * k), lower, upper, actions, _decisionPreSquash, explore);
    }

    /// <summary>Runs one episode of <paramref name="task"/>, training as it goes when <paramref name="train"/> is set.</summary>
    /// <param name="task">The task.</param>
    /// <param name="seed">Episode seed passed to <see cref="IControlTask.Reset"/>.</param>
    /// <param name="train">Explore and update (true) or act on the mean without learning (false).</param>
    /// <returns>Total cost, steps and updates.</returns>
    public EpisodeResult RunEpisode(IControlTask task, ulong seed, bool train)
    {
        ArgumentNullException.ThrowIfNull(task);
        if (task.AgentCount != AgentCount || task.StateSizePerAgent != StateSizePerAgent || task.ActionSizePerAgent != ActionSizePerAgent)
        {
            throw new ArgumentException("The task's agent count, state size or action size differs from the learner's.", nameof(task));
        }
        int s = AgentCount * StateSizePerAgent, a = AgentCount * ActionSizePerAgent;
        float[] state = new float[s], next = new float[s], lower = new float[a], upper = new float[a], actions = new float[a];
        float[] costs = new float[AgentCount];
        DiscardRollout();
        task.Reset(seed);
        task.Observe(state);
        double total = 0;
        int steps = 0, updates = 0;
        bool done = false;
        while (!done)
        {
            task.GetBounds(lower, upper);
            Act(state, lower, upper, actions, train);
            done = task.Step(actions, costs);
            steps++;
            for (int m = 0; m < AgentCount; m++)
            {
                total += costs[m];
            }
            if (!done)
            {
                task.Observe(next);
            }
            if (train)
            {
                if (Record(costs, next, done))
                {
                    updates++;
                }
            }
            else
            {
                _hasPending = false;
            }
            (state, next) = (next, state);
        }
        return new EpisodeResult(total, steps, updates);
    }

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
            EpisodeResult r = RunEpisode(task, LearningRandom.DeriveSeed(seed, (ulong)e), train: true);
            results.Add(r);
            progress?.Invoke(e, r);
        }
        return results;
    }

    /// <summary>
    /// The warm start's target for one demonstrated action: the pre-squash value u* = atanh(2(a − lo)/(hi − lo) − 1), |u*|
    /// capped at <paramref name="edge"/> (an action on its bound has no finite u*); 0 and inactive for an empty box
    /// (width ≤ 1e-6). Shared by <see cref="WarmStart"/> and the federated households' local warm start.
    /// </summary>
    /// <param name="action">The demonstrated action.</param>
    /// <param name="lower">Lower bound of its box.</param>
    /// <param name="upper">Upper bound of its box.</param>
    /// <param name="edge">Largest |u*| (&gt; 0).</param>
    /// <param name="active">Whether the box is wide enough for the target to mean anything.</param>
    /// <returns>u*.</returns>
    public static float CloneTarget(float action, float lower, float upper, float edge, out bool active)
    {
        float width = upper - lower;
        active = HasCloneTarget(lower, upper);
        float limit = MathF.Tanh(edge);
        float y = active ? Math.Clamp(2f * (action - lower) / width - 1f, -limit, limit) : 0f;
        return MathF.Atanh(y);
    }

    /// <summary>Whether a box is wide enough (width &gt; 1e-6) for <see cref="CloneTarget"/>'s target to mean anything (its <c>active</c>).</summary>
    /// <param name="lower">Lower bound of the box.</param>
    /// <param name="upper">Upper bound of the box.</param>
    /// <returns>True for a box that is not empty.</returns>
    public static bool HasCloneTarget(float lower, float upper) => upper - lower > 1e-6f;

    /// <summary>
    /// Warm start from a demonstrator's transitions (behaviour cloning for the actor, policy evaluation for the
    /// critic), e.g. a rule that ran the first day: <paramref name="epochs"/> passes over the rows in a seeded shuffled
    /// order, in minibatches of <paramref name="batchSize"/> rows, one Adam step of each network per minibatch, then both
    /// optimisers are reset (<see cref="ResetOptimisers"/>) so that the reinforcement updates start with fresh moments.
    /// The actor's means are fitted by least squares to the pre-squash values u* = atanh(2(a − lo)/(hi − lo) − 1) of the
    /// demonstrated actions, |u*| capped at <paramref name="edge"/> (an action on its bound has no finite u*); heads
    /// with an empty box do not contribute, and the log-stds are left as they are. The critic is fitted to the
    /// discounted returns of the demonstrator's scaled costs over the rows (row i's return bootstrapped by the critic
    /// at <paramref name="bootstrapState"/> after the last row, recomputed every pass; empty = the sequence ended).
    /// </summary>
    /// <param name="states">Full states of the rows (rows · M · state size), in time order.</param>
    /// <param name="lower">Lower bounds of the rows (rows · M · k).</param>
    /// <param name="upper">Upper bounds of the rows (rows · M · k).</param>
    /// <param name="actions">The demonstrated actions (rows · M · k).</param>
    /// <param name="costs">Each agent's cost of each row (rows · M), unscaled like <see cref="Record"/>'s.</param>
    /// <param name="bootstrapState">The state after the last row, or empty.</param>
    /// <param name="epochs">Passes over the rows (≥ 1).</param>
    /// <param name="batchSize">Rows per minibatch (≥ 1).</param>
    /// <param name="edge">Largest |u*| (&gt; 0).</param>
    /// <param name="learningRate">Adam step size of both networks during the warm start (their own step sizes are restored after it).</param>
    /// <returns>The actor's mean squared pre-squash error and the critic's mean squared error (per head) of the last pass.</returns>
    public (double ActorLoss, double CriticLoss) WarmStart(ReadOnlySpan<float> states, ReadOnlySpan<float> lower, ReadOnlySpan<float> upper,
        ReadOnlySpan<float> actions, ReadOnlySpan<float> costs, ReadOnlySpan<float> bootstrapState, int epochs, int batchSize, float edge,
        double learningRate)
    {
        int m = AgentCount, k = ActionSizePerAgent, s = m * StateSizePerAgent, a = m * k;
        if (states.Length == 0 || states.Length % s != 0)
        {
            throw new ArgumentException($"States need a positive multiple of {s} floats.", nameof(states));
        }
        int rows = states.Length / s;
        if (lower.Length != rows * a || upper.Length != rows * a || actions.Length != rows * a || costs.Length != rows * m)
        {
            throw new ArgumentException($"{rows} rows need {rows * a} bounds and actions and {rows * m} costs.");
        }
        if (bootstrapState.Length != 0 && bootstrapState.Length != s)
        {
            throw new ArgumentException($"The bootstrap state needs {s} floats or none.", nameof(bootstrapState));
        }
        ArgumentOutOfRangeException.ThrowIfLessThan(epochs, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(batchSize, 1);
        if (!(edge > 0))
        {
            throw new ArgumentOutOfRangeException(nameof(edge), "The cap on |u*| must be positive.");
        }
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(learningRate);
        _actorOptimiser.LearningRate = learningRate;
        _criticOptimiser.LearningRate = learningRate;
        var targetU = new float[rows * a];
        var active = new bool[rows * a];
        for (int i = 0; i < targetU.Length; i++)
        {
            targetU[i] = CloneTarget(actions[i], lower[i], upper[i], edge, out active[i]);
        }
        var targets = new float[rows * m];
        var order = new int[rows];
        for (int i = 0; i < rows; i++)
        {
            order[i] = i;
        }
        var shuffle = new LearningRandom(LearningRandom.DeriveSeed(_options.Seed, 4));
        float gamma = (float)_options.Gamma;
        double actorLoss = 0, criticLoss = 0;
        for (int epoch = 0; epoch < epochs; epoch++)
        {
            if (bootstrapState.Length == 0)
            {
                Array.Clear(_returns);
            }
            else
            {
                Critic.Forward(bootstrapState, _criticWorkspace, _returns);
            }
            for (int i = rows - 1; i >= 0; i--)
            {
                for (int h = 0; h < m; h++)
                {
                    _returns[h] = (float)(costs[i * m + h] * _options.CostScale) + gamma * _returns[h];
                    targets[i * m + h] = _returns[h];
                }
            }
            for (int i = rows - 1; i > 0; i--)
            {
                int j = shuffle.NextInt(i + 1);
                (order[i], order[j]) = (order[j], order[i]);
            }
            actorLoss = criticLoss = 0;
            for (int start = 0; start < rows; start += batchSize)
            {
                int end = Math.Min(rows, start + batchSize);
                float weight = 1f / (end - start);
                Array.Clear(_actorGradient);
                Array.Clear(_criticGradient);
                for (int b = start; b < end; b++)
                {
                    int i = order[b];
                    ReadOnlySpan<float> state = states.Slice(i * s, s);
                    Critic.Forward(state, _criticWorkspace, _values);
                    criticLoss += ActorCriticLoss.Critic(_values, targets.AsSpan(i * m, m), weight, _valueGradient) * (end - start) / rows;
                    Critic.Backward(_criticWorkspace, _valueGradient, _criticGradient);

                    Actor.Forward(state, _actorWorkspace, _actorOutput);
                    Array.Clear(_actorOutputGradient);
                    for (int h = 0; h < m; h++)
                    {
                        for (int j = 0; j < k; j++)
                        {
                            int idx = i * a + h * k + j;
                            if (!active[idx])
                            {
                                continue;
                            }
                            int meanIndex = 2 * k * h + j;
                            float d = _actorOutput[meanIndex] - targetU[idx];
                            _actorOutputGradient[meanIndex] = weight * d;
                            actorLoss += 0.5 * d * d / rows;
                        }
                    }
                    Actor.Backward(_actorWorkspace, _actorOutputGradient, _actorGradient);
                }
                GradientClipping.ClipGlobalNorm(_criticGradient, _options.MaxGradientNorm);
                GradientClipping.ClipGlobalNorm(_actorGradient, _options.MaxGradientNorm);
                _criticOptimiser.Step(Critic.Parameters, _criticGradient);
                _actorOptimiser.Step(Actor.Parameters, _actorGradient);
            }
        }
        _actorOptimiser.LearningRate = _options.ActorLearningRate;
        _criticOptimiser.LearningRate = _options.CriticLearningRate;
        ResetOptimisers();
        return (2 * actorLoss / m / k, 2 * criticLoss / m);
    }

    private void SampleHead(ReadOnlySpan<float> head, ReadOnlySpan<float> lower, ReadOnlySpan<float> upper,
        Span<float> actions, Span<float> preSquash, bool explore)
    {
        int k = ActionSizePerAgent;
        for (int j = 0; j < k; j++)
        {
            float mean = head[j];
            float u = mean;
            if (explore)
            {
                float logStd = SquashedGaussian.LogStd(head[k + j], _options.LogStdMin, _options.LogStdMax);
                u = mean + MathF.Exp(logStd) * (float)_random.NextGaussian();
            }
            preSquash[j] = u;
            actions[j] = SquashedGaussian.Squash(u, lower[j], upper[j]);
        }
    }

    private void Update(bool terminal)
    {
        int t = _rolloutLength, m = AgentCount, s = _pendingState.Length, a = _pendingPreSquash.Length;
        if (terminal)
        {
            Array.Clear(_returns);
        }
        else
        {
            Critic.Forward(_bootstrapState, _criticWorkspace, _returns);
        }
        float gamma = (float)_options.Gamma;
        float lambda = (float)_options.GaeLambda;
        bool ratioTerms = _options.UpdateEpochs > 1 || _options.ClipRatio > 0;
        // Advantages and critic targets with the networks as they acted (no update happens inside a rollout).
        // λ = 1 keeps the plain n-step return R_i = c_i + γR_{i+1}, advantage R_i − V_i.
        Span<float> nextValue = _advantages; // V(s_{i+1}) per agent while walking back (λ < 1 only)
        if (lambda < 1f)
        {
            _returns.AsSpan().CopyTo(nextValue);
            Array.Clear(_returns); // running GAE per agent
        }
        for (int i = t - 1; i >= 0; i--)
        {
            ReadOnlySpan<float> state = _rolloutStates.AsSpan(i * s, s);
            Span<float> values = _rolloutValues.AsSpan(i * m, m);
            Critic.Forward(state, _criticWorkspace, values);
            for (int h = 0; h < m; h++)
            {
                float cost = _rolloutCosts[i * m + h];
                if (lambda < 1f)
                {
                    float delta = cost + gamma * nextValue[h] - values[h];
                    _returns[h] = delta + gamma * lambda * _returns[h];
                    _rolloutAdvantages[i * m + h] = _returns[h];
                    _rolloutTargets[i * m + h] = _returns[h] + values[h];
                    nextValue[h] = values[h];
                }
                else
                {
                    _returns[h] = cost + gamma * _returns[h];
                    _rolloutAdvantages[i * m + h] = _returns[h] - values[h];
                    _rolloutTargets[i * m + h] = _returns[h];
                }
            }
            if (ratioTerms)
            {
                Actor.Forward(state, _actorWorkspace, _actorOutput);
                HeadLogProbs(_actorOutput, i, _rolloutOldLogProb.AsSpan(i * m, m));
            }
        }
        if (_options.NormaliseAdvantages && t * m > 1)
        {
            Span<float> adv = _rolloutAdvantages.AsSpan(0, t * m);
            double sum = 0, sq = 0;
            foreach (float v in adv) sum += v;
            double mean = sum / adv.Length;
            foreach (float v in adv) sq += (v - mean) * (v - mean);
            float std = (float)Math.Sqrt(sq / adv.Length) + 1e-6f;
            for (int j = 0; j < adv.Length; j++) adv[j] = (float)((adv[j] - mean) / std);
        }
        float weight = 1f / t;
        float clip = (float)_options.ClipRatio;
        for (int epoch = 0; epoch < _options.UpdateEpochs; epoch++)
        {
            Array.Clear(_actorGradient);
            Array.Clear(_criticGradient);
            for (int i = t - 1; i >= 0; i--)
            {
                ReadOnlySpan<float> state = _rolloutStates.AsSpan(i * s, s);
                Critic.Forward(state, _criticWorkspace, _values);
                ActorCriticLoss.Critic(_values, _rolloutTargets.AsSpan(i * m, m), weight, _valueGradient);
                Critic.Backward(_criticWorkspace, _valueGradient, _criticGradient);

                Actor.Forward(state, _actorWorkspace, _actorOutput);
                ReadOnlySpan<float> advantages = _rolloutAdvantages.AsSpan(i * m, m);
                if (ratioTerms)
                {
                    HeadLogProbs(_actorOutput, i, _coefficients);
                    for (int h = 0; h < m; h++)
                    {
                        // The log-ratio is capped at ln 3 (dual clip, Ye et al. 2020): a far-off stored action under a
                        // narrow σ would otherwise overflow the ratio.
                        float ratio = MathF.Exp(Math.Clamp(_coefficients[h] - _rolloutOldLogProb[i * m + h], -20f, DualClipLogRatio));
                        float adv = advantages[h];
                        // Cost advantage (minimised): the clipped objective is max(r·A, clip(r)·A); its gradient is
                        // r·A·∇log π while the unclipped term is the larger one, else 0 (a cheaper-than-expected action,
                        // A < 0, stops being pushed up once r > 1 + ε; a dearer one, A > 0, once r < 1 − ε).
                        bool clipped = clip > 0 && ((adv < 0 && ratio > 1f + clip) || (adv > 0 && ratio < 1f - clip));
                        _coefficients[h] = clipped ? 0f : ratio * adv;
                    }
                    advantages = _coefficients;
                }
                ActorCriticLoss.Actor(_actorOutput, _rolloutPreSquash.AsSpan(i * a, a), advantages,
                    _rolloutLower.AsSpan(i * a, a), _rolloutUpper.AsSpan(i * a, a), ActionSizePerAgent,
                    _options.EntropyCoefficient, _options.LogStdMin, _options.LogStdMax, weight, _actorOutputGradient);
                Actor.Backward(_actorWorkspace, _actorOutputGradient, _actorGradient);
            }
            LastCriticGradientNorm = GradientClipping.ClipGlobalNorm(_criticGradient, _options.MaxGradientNorm);
            LastActorGradientNorm = GradientClipping.ClipGlobalNorm(_actorGradient, _options.MaxGradientNorm);
            _criticOptimiser.Step(Critic.Parameters, _criticGradient);
            _actorOptimiser.Step(Actor.Parameters, _actorGradient);
        }
        _rolloutLength = 0;
        UpdateCount++;
    }

    private static readonly float DualClipLogRatio = MathF.Log(3f);

    /// <summary>
    /// Joint pre-squash Gaussian log-density (up to the constant and the squash's Jacobian, which cancel in the
    /// ratio) of row <paramref name="row"/>'s stored actions under each head of <paramref name="output"/>.
    /// </summary>
    private void HeadLogProbs(ReadOnlySpan<float> output, int row, Span<float> logProbs)
    {
        int k = ActionSizePerAgent, a = AgentCount * k;
        for (int h = 0; h < AgentCount; h++)
        {
            double sum = 0;
            for (int j = 0; j < k; j++)
            {
                int idx = row * a + h * k + j;
                float logStd = SquashedGaussian.LogStd(output[2 * k * h + k + j], _options.LogStdMin, _options.LogStdMax);
                double z = (_rolloutPreSquash[idx] - output[2 * k * h + j]) * Math.Exp(-logStd);
                sum += -0.5 * z * z - logStd;
            }
            logProbs[h] = (float)sum;
        }
    }
}
