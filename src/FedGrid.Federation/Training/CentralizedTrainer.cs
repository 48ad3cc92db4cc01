using System.Collections.Immutable;
using System.Diagnostics;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;
using FedGrid.Households.Tariffs;
using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tabular;

namespace FedGrid.Federation.Training;

/// <summary>The learners the trainer can run.</summary>
public enum LearnerKind
{
    /// <summary>Advantage actor-critic with a squashed-Gaussian policy (<see cref="ActorCriticLearner"/>).</summary>
    ActorCritic,
    /// <summary>Tabular Q-learning, one table per household (<see cref="QLearner"/>).</summary>
    QLearning,
    /// <summary>Tabular double Q-learning, two tables per household (<see cref="DoubleQLearner"/>).</summary>
    DoubleQ,
}

/// <summary>Which periods of a time-of-use tariff the warm start's price rule holds flexible load at its minimum in.</summary>
public enum WarmStartRule
{
    /// <summary>The peak-price periods only (the demo's rule).</summary>
    Peak,
    /// <summary>Every period dearer than the cheapest: flexible load only in the cheapest period.</summary>
    CheapestPeriod,
}

/// <summary>Names of the warm-start rules as used on the command line and in summaries.</summary>
public static class WarmStartRuleNames
{
    /// <summary>"peak" or "cheapest-period".</summary>
    public static string Of(WarmStartRule rule) => rule switch
    {
        WarmStartRule.Peak => "peak",
        WarmStartRule.CheapestPeriod => "cheapest-period",
        _ => throw new ArgumentOutOfRangeException(nameof(rule)),
    };

    /// <summary>The rule of a name, or null when unknown.</summary>
    public static WarmStartRule? Parse(string name) => name switch
    {
        "peak" => WarmStartRule.Peak,
        "cheapest-period" => WarmStartRule.CheapestPeriod,
        _ => null,
    };
}

/// <summary>Names of the learners as used on the command line and in summaries.</summary>
public static class LearnerNames
{
    /// <summary>"actor-critic", "q-learning" or "double-q".</summary>
    public static string Of(LearnerKind kind) => kind switch
    {
        LearnerKind.ActorCritic => "actor-critic",
        LearnerKind.QLearning => "q-learning",
        LearnerKind.DoubleQ => "double-q",
        _ => throw new ArgumentOutOfRangeException(nameof(kind)),
    };

    /// <summary>The kind of a name, or null when unknown.</summary>
    public static LearnerKind? Parse(string name) => name switch
    {
        "actor-critic" => LearnerKind.ActorCritic,
        "q-learning" => LearnerKind.QLearning,
        "double-q" => LearnerKind.DoubleQ,
        _ => null,
    };
}

/// <summary>Settings of a centralized training run. Null learner settings take <see cref="TrainingDefaults"/>.</summary>
/// <param name="Learner">Which learner.</param>
/// <param name="Seed">Seed of the learner (initial weights, exploration); the data come from the scenario's own seed.</param>
/// <param name="ActorCritic">Actor-critic settings (its own seed is replaced by one derived from <paramref name="Seed"/>).</param>
/// <param name="Tabular">Tabular settings (seed replaced likewise; a null ε schedule length is fitted to the budget).</param>
/// <param name="Task">Adapter settings (projection on by default).</param>
/// <param name="WarmStartDays">
/// Actor-critic only: days at the start of the horizon on which the price rule (<see cref="PriceThresholdPolicy"/>)
/// acts while the learner watches, before its warm start (<see cref="ActorCriticLearner.WarmStart"/>); those days'
/// figures are the rule's. Null: <see cref="TrainingDefaults.WarmStartDays"/>; 0: none.
/// </param>
/// <param name="Rule">The warm start's price rule; null: <see cref="TrainingDefaults.CentralizedWarmStartRule"/>.</param>
/// <param name="EvaluationDays">
/// Days at the end of the horizon on which the learner acts without exploring and without learning (actor-critic: the
/// policy's mean; tabular: the greedy action): the trained policy as it would be deployed, measured on days it did not
/// train on. Their figures are the final window's when this equals <see cref="TrainingSummary.FinalWindowDays"/>.
/// Null: <see cref="TrainingDefaults.EvaluationDays"/>; 0: the learner explores and learns to the last day.
/// </param>
public sealed record TrainingOptions(LearnerKind Learner, ulong Seed = 1, ActorCriticOptions? ActorCritic = null, TabularOptions? Tabular = null,
    HouseholdTaskOptions? Task = null, int? WarmStartDays = null, int? EvaluationDays = null, WarmStartRule? Rule = null)
{
    /// <summary>The first day (0-based) of the evaluation window in a horizon of <paramref name="dayCount"/> days; <paramref name="dayCount"/> when there is none.</summary>
    /// <param name="dayCount">Days of the horizon.</param>
    public int FirstEvaluationDay(int dayCount)
    {
        int e = EvaluationDays ?? TrainingDefaults.EvaluationDays;
        ArgumentOutOfRangeException.ThrowIfNegative(e, nameof(EvaluationDays));
        return Math.Max(0, dayCount - e);
    }
}

/// <summary>The settings this project tuned on the default scenario (60 days); see the README "Training" section.</summary>
public static class TrainingDefaults
{
    /// <summary>
    /// Actor-critic: [64, 64] tanh, γ = 0.95, one-step TD updates (every slot), actor 1e-3, critic 1e-3, entropy 1e-3,
    /// cost scale 4, log σ in [−3, 1] (initial σ = e^−1 ≈ 0.37 before the squash); trained on shaped costs (see
    /// <see cref="TaskFor"/>).
    /// </summary>
    public static ActorCriticOptions ActorCritic { get; } = new()
    {
        HiddenSizes = [64, 64],
        Gamma = 0.95,
        RolloutSteps = 1,
        ActorLearningRate = 1e-3,
        CriticLearningRate = 1e-3,
        EntropyCoefficient = 1e-3,
        CostScale = 4.0,
        LogStdMin = -3f,
        LogStdMax = 1f,
    };

    /// <summary>
    /// The adapter settings for a learner when <see cref="TrainingOptions.Task"/> is null: projection on, and for
    /// actor-critic the potential-based shaping of its training costs with its own γ
    /// (<see cref="HouseholdTaskOptions.ShapingDiscount"/>); the tabular learners see the true costs.
    /// </summary>
    /// <param name="options">The training settings.</param>
    public static HouseholdTaskOptions TaskFor(TrainingOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        if (options.Learner != LearnerKind.ActorCritic) return HouseholdTaskOptions.Default;
        ActorCriticOptions ac = options.ActorCritic ?? ActorCritic;
        return new HouseholdTaskOptions(ShapingDiscount: ac.Gamma);
    }

    /// <summary>
    /// Actor-critic after a warm start (<see cref="WarmStartDays"/> &gt; 0 and no <see cref="TrainingOptions.ActorCritic"/>):
    /// <see cref="ActorCritic"/> with the actor's step at 3e-5, so that the reinforcement updates refine the cloned rule
    /// instead of overwriting it (with 1e-3 the cloned policy fell apart within two weeks; with 1e-4 it drifted from the
    /// rule's staggered release into a rebound peak at the off-peak start; see the README "Training").
    /// </summary>
    public static ActorCriticOptions WarmStartedActorCritic { get; } = ActorCritic with { ActorLearningRate = 3e-5 };

    /// <summary>
    /// The centralized warm start's rule: <see cref="WarmStartRule.CheapestPeriod"/> (with time-of-use on the default
    /// scenario it captures 88–89 % of the savings on its own, the peak rule 66–68 %). The federated warm start keeps
    /// <see cref="WarmStartRule.Peak"/>: its coarser clone of the cheapest-period rule ended at 46 % against 61 % (README "Federated training").
    /// </summary>
    public const WarmStartRule CentralizedWarmStartRule = WarmStartRule.CheapestPeriod;

    /// <summary>Days at the end on which the learner is evaluated rather than trained (see <see cref="TrainingOptions.EvaluationDays"/>).</summary>
    public const int EvaluationDays = 0;

    /// <summary>Days of the price rule before the actor-critic's warm start (see <see cref="TrainingOptions.WarmStartDays"/>).</summary>
    public const int WarmStartDays = 1;

    /// <summary>Passes of the warm start over the rule's transitions.</summary>
    public const int WarmStartEpochs = 50;

    /// <summary>Adam step size of the warm start.</summary>
    public const double WarmStartLearningRate = 1e-3;

    /// <summary>Rows per minibatch of the warm start.</summary>
    public const int WarmStartBatch = 16;

    /// <summary>Cap on the pre-squash targets of the warm start (tanh 2.5 ≈ 0.987: an action on its bound is cloned 0.7 % inside it).</summary>
    public const float WarmStartEdge = 2.5f;

    /// <summary>
    /// The price rule's threshold from public information only. A time-of-use tariff: its peak price
    /// (<see cref="WarmStartRule.Peak"/>), or its lowest price above the cheapest one in the published schedule (the first
    /// week's slots; <see cref="WarmStartRule.CheapestPeriod"/>: flexible load moves into the cheapest period, which comes
    /// back every day; infinite for a single price, nothing to move). Any other tariff, either rule: the 80th percentile of
    /// the public forecast (<see cref="HouseholdControlTask.PublicForecast"/>) over the first day. (The demo's rule holds
    /// load only at the peak price, or above the 80th percentile of the realised prices of the whole horizon, which the
    /// trainer does not know.)
    /// </summary>
    /// <param name="tariff">The tariff.</param>
    /// <param name="slots">Slots of the horizon.</param>
    /// <param name="rule">Which periods the rule holds flexible load in.</param>
    public static double RuleThreshold(ITariff tariff, int slots, WarmStartRule rule = WarmStartRule.Peak)
    {
        ArgumentNullException.ThrowIfNull(tariff);
        if (tariff is TimeOfUseTariff tou)
        {
            if (rule == WarmStartRule.Peak) return tou.HighestPrice;
            double cheapest = double.PositiveInfinity, next = double.PositiveInfinity; // the two lowest distinct prices
            for (int t = 0; t < Math.Min(slots, 7 * SlotCalendar.SlotsPerDay); t++)
            {
                double p = tou.PriceAt(t);
                if (p < cheapest) (cheapest, next) = (p, cheapest);
                else if (p > cheapest && p < next) next = p;
            }
            return next;
        }
        var forecast = new double[Math.Min(slots, SlotCalendar.SlotsPerDay)];
        for (int t = 0; t < forecast.Length; t++) forecast[t] = HouseholdControlTask.PublicForecast(tariff, t);
        return PriceThresholdPolicy.ThresholdFor(forecast);
    }

    /// <summary>Tabular: γ = 0.95, ε from 1 to 0.05 over the first third of the budget, α = 1/(1+n)^0.6 per visit count.</summary>
    public static TabularOptions Tabular(int decisionSteps) => new()
    {
        Gamma = 0.95,
        Epsilon = new LinearSchedule(1.0, 0.05, Math.Max(1, decisionSteps / 3)),
        LearningRate = new PolynomialSchedule(1.0, 0.6),
    };

    /// <summary>Levels of the tabular action grid inside each household's box.</summary>
    public const int ActionLevels = 5;

    /// <summary>
    /// Bins per state feature of the tabular learners (same order as <see cref="HouseholdControlTask.FeatureNames"/>): the
    /// desired power (3), price (4), time of day via sin and cos (4 each), weekend (2); the rest unbinned.
    /// </summary>
    public static ImmutableArray<int> TabularBins { get; } = [1, 1, 3, 4, 4, 4, 2, 1, 1, 1, 1, 1, 1, 1];

    /// <summary>Lower ends of the tabular bins (scaled features).</summary>
    public static ImmutableArray<float> TabularLower { get; } = [0, 0, 0, 0.2f, -1, -1, 0, 0, 0, 0, 0, 0, 0, 0];

    /// <summary>Upper ends of the tabular bins (scaled features).</summary>
    public static ImmutableArray<float> TabularUpper { get; } = [1, 1, 1.5f, 1.8f, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1];
}

/// <summary>What a training run produced.</summary>
/// <param name="Learner">Learner name.</param>
/// <param name="Days">One entry per simulated day, in order.</param>
/// <param name="DecisionSteps">Slots stepped (each a decision for every household).</param>
/// <param name="Updates">Learning updates made.</param>
/// <param name="Elapsed">Wall time of the training.</param>
public sealed record TrainingRun(string Learner, ImmutableArray<DayMetrics> Days, long DecisionSteps, long Updates, TimeSpan Elapsed);

/// <summary>
/// Trains one learner centrally (the coordinator sees every household's state) on the days of a scenario: one
/// episode per simulated day, each day new data, the training budget is the scenario's number of days. Every
/// slot's proposals go through the safety projection (<see cref="HouseholdControlTask"/>). The learner acts with
/// exploration and learns as it goes, so a day's figures are the online cost of that day, except on the evaluation days
/// at the end (<see cref="TrainingOptions.EvaluationDays"/>), where it acts on what it learned without exploring or learning. The horizon is continuous:
/// the learners bootstrap across midnight (deferred energy carries over) and stop at the end of the horizon.
/// Seeded and deterministic.
/// </summary>
public sealed class CentralizedTrainer
{
    private readonly Scenario _scenario;

    /// <summary>Prepares a run.</summary>
    /// <param name="scenario">The scenario; its days are the budget.</param>
    /// <param name="options">Settings.</param>
    public CentralizedTrainer(Scenario scenario, TrainingOptions options)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        ArgumentNullException.ThrowIfNull(options);
        _scenario = scenario;
        Options = options;
        Task = new HouseholdControlTask(scenario, options.Task ?? TrainingDefaults.TaskFor(options));
    }

    /// <summary>The settings.</summary>
    public TrainingOptions Options { get; }

    /// <summary>The adapter the learner runs on.</summary>
    public HouseholdControlTask Task { get; }

    /// <summary>
    /// The actor's mean squared pre-squash error and the critic's mean squared error of the warm start's last pass, or
    /// null when there was none (see <see cref="ActorCriticLearner.WarmStart"/>).
    /// </summary>
    public (double ActorLoss, double CriticLoss)? WarmStartLoss { get; private set; }

    /// <summary>The actor-critic after <see cref="Train"/> (null for the tabular learners).</summary>
    public ActorCriticLearner? ActorCritic { get; private set; }

    /// <summary>The tabular controller after <see cref="Train"/> (null for actor-critic).</summary>
    public TabularController? Tabular { get; private set; }

    /// <summary>Trains over every day of the scenario.</summary>
    /// <param name="progress">Called after each day with its figures, or null.</param>
    public TrainingRun Train(Action<DayMetrics>? progress = null)
    {
        var watch = Stopwatch.StartNew();
        var days = ImmutableArray.CreateBuilder<DayMetrics>(Task.DayCount);
        long steps, updates;
        Action<DayMetrics> onDay = d =>
        {
            days.Add(d);
            progress?.Invoke(d);
        };
        (steps, updates) = Options.Learner == LearnerKind.ActorCritic ? RunActorCritic(onDay) : RunTabular(onDay);
        return new TrainingRun(LearnerNames.Of(Options.Learner), days.ToImmutable(), steps, updates, watch.Elapsed);
    }

    private (long Steps, long Updates) RunActorCritic(Action<DayMetrics> onDay)
    {
        int warmDays = Options.WarmStartDays ?? TrainingDefaults.WarmStartDays;
        ArgumentOutOfRangeException.ThrowIfNegative(warmDays, nameof(TrainingOptions.WarmStartDays));
        ActorCriticOptions o = (Options.ActorCritic ?? (warmDays > 0 ? TrainingDefaults.WarmStartedActorCritic : TrainingDefaults.ActorCritic))
            with { Seed = LearningRandom.DeriveSeed(Options.Seed, 0xAC) };
        HouseholdControlTask task = Task;
        var learner = new ActorCriticLearner(task.AgentCount, task.StateSizePerAgent, 1, o);
        ActorCritic = learner;
        int n = task.AgentCount, s = n * task.StateSizePerAgent;
        float[] state = new float[s], next = new float[s], lower = new float[n], upper = new float[n], actions = new float[n], costs = new float[n];
        task.Reset(Options.Seed);
        task.Observe(state);
        long steps = 0, updates = 0;
        if (warmDays > 0)
        {
            // The rule acts on the first days (its figures are those days' online figures); the learner then clones it
            // and evaluates it on exactly those transitions.
            int rows = Math.Min(warmDays, task.DayCount) * SlotCalendar.SlotsPerDay;
            float[] states = new float[rows * s], lows = new float[rows * n], ups = new float[rows * n], acts = new float[rows * n],
                stepCosts = new float[rows * n];
            double[] setpoints = new double[n];
            var rule = new PriceThresholdPolicy(TrainingDefaults.RuleThreshold(_scenario.Tariff, task.Environment.SlotCount,
                    Options.Rule ?? TrainingDefaults.CentralizedWarmStartRule),
                PriceThresholdPolicy.DefaultReleaseSpreadSlots);
            for (int r = 0; r < rows; r++)
            {
                task.GetBounds(lower, upper);
                rule.Decide(task.Environment, setpoints);
                for (int m = 0; m < n; m++) actions[m] = Math.Clamp((float)setpoints[m], lower[m], upper[m]);
                state.CopyTo(states, r * s);
                lower.CopyTo(lows, r * n);
                upper.CopyTo(ups, r * n);
                actions.CopyTo(acts, r * n);
                bool dayOver = task.Step(actions, costs);
                costs.CopyTo(stepCosts, r * n);
                steps++;
                bool end = task.HorizonOver;
                if (!end) task.Observe(state);
                if (dayOver)
                {
                    onDay(task.LastDay!);
                    if (end) return (steps, updates);
                    task.NextDay();
                }
            }
            WarmStartLoss = learner.WarmStart(states, lows, ups, acts, stepCosts, state, TrainingDefaults.WarmStartEpochs,
                TrainingDefaults.WarmStartBatch, TrainingDefaults.WarmStartEdge, TrainingDefaults.WarmStartLearningRate);
        }
        int day = Math.Min(warmDays, task.DayCount), evaluateFrom = Options.FirstEvaluationDay(task.DayCount);
        while (true)
        {
            bool learn = day < evaluateFrom;
            task.GetBounds(lower, upper);
            learner.Act(state, lower, upper, actions, explore: learn);
            bool dayOver = task.Step(actions, costs);
            steps++;
            bool end = task.HorizonOver;
            if (!end) task.Observe(next);
            if (!learn) learner.DiscardRollout();
            else if (learner.Record(costs, next, end)) updates++;
            (state, next) = (next, state);
            if (dayOver)
            {
                onDay(task.LastDay!);
                if (end) break;
                task.NextDay();
                day++;
            }
        }
        return (steps, updates);
    }

    private (long Steps, long Updates) RunTabular(Action<DayMetrics> onDay)
    {
        HouseholdControlTask task = Task;
        int n = task.AgentCount, k = task.StateSizePerAgent;
        TabularOptions o = (Options.Tabular ?? TrainingDefaults.Tabular(task.Environment.SlotCount))
            with { Seed = LearningRandom.DeriveSeed(Options.Seed, 0x7AB) };
        var discretiser = new UniformDiscretiser(TrainingDefaults.TabularLower.AsSpan(), TrainingDefaults.TabularUpper.AsSpan(),
            TrainingDefaults.TabularBins.AsSpan());
        var grid = new BoxActionGrid(TrainingDefaults.ActionLevels);
        var controller = new TabularController(n, k, discretiser, grid, o, Options.Learner == LearnerKind.DoubleQ);
        Tabular = controller;
        float[] state = new float[n * k], lower = new float[n], upper = new float[n], actions = new float[n], costs = new float[n];
        int[] s = new int[n], a = new int[n];
        task.Reset(Options.Seed);
        task.Observe(state);
        for (int m = 0; m < n; m++) s[m] = discretiser.Index(state.AsSpan(m * k, k));
        long steps = 0, updates = 0;
        int day = 0, evaluateFrom = Options.FirstEvaluationDay(task.DayCount);
        while (true)
        {
            bool learn = day < evaluateFrom;
            task.GetBounds(lower, upper);
            for (int m = 0; m < n; m++)
            {
                a[m] = learn ? controller.Learner(m).SelectAction(s[m]) : controller.Learner(m).GreedyAction(s[m]);
                grid.Decode(a[m], lower.AsSpan(m, 1), upper.AsSpan(m, 1), actions.AsSpan(m, 1));
            }
            bool dayOver = task.Step(actions, costs);
            steps++;
            bool end = task.HorizonOver;
            if (!end) task.Observe(state);
            for (int m = 0; m < n; m++)
            {
                int next = end ? s[m] : discretiser.Index(state.AsSpan(m * k, k));
                if (learn)
                {
                    controller.Learner(m).Update(s[m], a[m], costs[m], next, end);
                    updates++;
                }
                s[m] = next;
            }
            if (dayOver)
            {
                onDay(task.LastDay!);
                if (end) break;
                task.NextDay();
                day++;
            }
        }
        return (steps, updates);
    }
}

