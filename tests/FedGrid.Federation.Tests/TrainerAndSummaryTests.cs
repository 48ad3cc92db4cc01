using System.Collections.Immutable;
using System.Text.Json;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Tests;

public class TrainerAndSummaryTests
{
    private static readonly Scenario TwoDays = DefaultScenario.Create(DefaultScenario.DefaultSeed, 2);

    [Theory]
    [InlineData(LearnerKind.ActorCritic)]
    [InlineData(LearnerKind.QLearning)]
    [InlineData(LearnerKind.DoubleQ)]
    public void Training_is_deterministic_for_a_seed_and_differs_between_seeds(LearnerKind kind)
    {
        var progress = new List<int>();
        TrainingRun a = new CentralizedTrainer(TwoDays, new TrainingOptions(kind, Seed: 5)).Train(d => progress.Add(d.Day));
        TrainingRun b = new CentralizedTrainer(TwoDays, new TrainingOptions(kind, Seed: 5)).Train();
        TrainingRun c = new CentralizedTrainer(TwoDays, new TrainingOptions(kind, Seed: 6)).Train();
        Assert.Equal([1, 2], progress);
        Assert.Equal(a.Days.ToArray(), b.Days.ToArray());
        // Actor-critic's first day is the price rule's (warm start), the same for every learner seed; the second is its own.
        Assert.NotEqual(a.Days[^1].Cost, c.Days[^1].Cost);
        Assert.Equal(2 * 96, a.DecisionSteps);
        Assert.Equal(LearnerNames.Of(kind), a.Learner);
        Assert.True(a.Updates > 0);
        // Online training keeps the feeder inside its limits (projection every slot) unless a projection is on record as failed.
        foreach (DayMetrics d in a.Days)
            Assert.True(d.ViolationSlots <= d.ProjectionTrouble.Unverified + d.ProjectionTrouble.Infeasible + d.ProjectionTrouble.SolverFailures);
    }

    [Fact]
    public void Actor_critic_warm_start_runs_the_rule_on_its_first_day_then_learns()
    {
        CentralizedTrainer Trainer(ulong seed, int? warm) => new(TwoDays, new TrainingOptions(LearnerKind.ActorCritic, seed, WarmStartDays: warm));
        CentralizedTrainer a = Trainer(5, null), b = Trainer(6, 1), none = Trainer(5, 0), rule = Trainer(5, 2);
        TrainingRun ra = a.Train(), rb = b.Train(), rn = none.Train(), rr = rule.Train();
        // Day 1 is the rule's whatever the learner's seed; with the rule on both days there is nothing left to learn.
        Assert.Equal(ra.Days[0], rb.Days[0]);
        Assert.Equal(ra.Days[0], rr.Days[0]);
        Assert.NotEqual(ra.Days[0].Cost, rn.Days[0].Cost);
        Assert.Equal(0, rr.Updates);
        Assert.Null(rule.WarmStartLoss);
        Assert.Equal(96, ra.Updates); // one-step updates on day 2 only
        Assert.Null(none.WarmStartLoss);
        // The clone fits the rule's bang-bang setpoints (pre-squash targets ±2.5) far better than the untrained policy's
        // near-zero means would (mean squared error 6.25).
        Assert.InRange(a.WarmStartLoss!.Value.ActorLoss, 0, 0.5);
        Assert.True(double.IsFinite(a.WarmStartLoss!.Value.CriticLoss));
        Assert.Equal(TrainingDefaults.WarmStartedActorCritic.ActorLearningRate, a.ActorCritic!.Options.ActorLearningRate);
        Assert.Equal(TrainingDefaults.ActorCritic.ActorLearningRate, none.ActorCritic!.Options.ActorLearningRate);
        Assert.Throws<ArgumentOutOfRangeException>(() => Trainer(5, -1).Train());
    }

    [Fact]
    public void The_warm_start_rule_holds_load_at_the_peak_or_at_every_price_above_the_cheapest()
    {
        // The default scenario's time-of-use tariff (DefaultScenario: off-peak 0.10, shoulder 0.18, peak 0.38 $/kWh).
        var tou = TwoDays.Tariff;
        Assert.Equal(DefaultScenario.PeakPrice, TrainingDefaults.RuleThreshold(tou, TwoDays.SlotCount));
        Assert.Equal(DefaultScenario.ShoulderPrice, TrainingDefaults.RuleThreshold(tou, TwoDays.SlotCount, WarmStartRule.CheapestPeriod));
        // A single price: nothing to move to, the cheapest-period rule never holds load.
        var flat = new FedGrid.Households.Tariffs.TimeOfUseTariff("flat", TwoDays.Calendar, "all day", 0.2, [], []);
        Assert.Equal(double.PositiveInfinity, TrainingDefaults.RuleThreshold(flat, TwoDays.SlotCount, WarmStartRule.CheapestPeriod));
        // Real-time prices: both rules take the forecast's 80th percentile.
        var rt = FedGrid.Households.Tariffs.RealTimeTariff.Generate("rt", new FedGrid.Households.Tariffs.RealTimePriceModel(), TwoDays.SlotCount, 3);
        Assert.Equal(TrainingDefaults.RuleThreshold(rt, TwoDays.SlotCount), TrainingDefaults.RuleThreshold(rt, TwoDays.SlotCount, WarmStartRule.CheapestPeriod));
        // The trainer's day 1 is the rule's: the two rules give different days, the default is the cheapest-period rule.
        DayMetrics Day1(WarmStartRule? rule) => new CentralizedTrainer(TwoDays, new TrainingOptions(LearnerKind.ActorCritic, 5, Rule: rule)).Train().Days[0];
        Assert.Equal(Day1(WarmStartRule.CheapestPeriod), Day1(null));
        Assert.True(Day1(WarmStartRule.CheapestPeriod).Bill < Day1(WarmStartRule.Peak).Bill);
        // The command-line and summary names.
        foreach (WarmStartRule r in Enum.GetValues<WarmStartRule>()) Assert.Equal(r, WarmStartRuleNames.Parse(WarmStartRuleNames.Of(r)));
        Assert.Equal("cheapest-period", WarmStartRuleNames.Of(WarmStartRule.CheapestPeriod));
        Assert.Null(WarmStartRuleNames.Parse("Peak"));
    }

    [Fact]
    public void Evaluation_days_act_without_learning_and_leave_the_days_before_them_alone()
    {
        CentralizedTrainer Trainer(LearnerKind kind, ulong seed, int? evaluation) =>
            new(TwoDays, new TrainingOptions(kind, seed, WarmStartDays: 0, EvaluationDays: evaluation));
        // Actor-critic: day 1 learns as before, day 2 acts on the policy's mean with no updates.
        TrainingRun learning = Trainer(LearnerKind.ActorCritic, 5, null).Train(), evaluated = Trainer(LearnerKind.ActorCritic, 5, 1).Train();
        Assert.Equal(2 * 96, learning.Updates);
        Assert.Equal(96, evaluated.Updates);
        Assert.Equal(learning.Days[0], evaluated.Days[0]);
        Assert.NotEqual(learning.Days[1].Cost, evaluated.Days[1].Cost);
        // Tabular, every day evaluated: greedy on untouched tables draws no random number, so the learner's seed no longer matters.
        foreach (LearnerKind kind in (LearnerKind[])[LearnerKind.QLearning, LearnerKind.DoubleQ])
        {
            TrainingRun a = Trainer(kind, 5, 2).Train(), b = Trainer(kind, 6, 2).Train();
            Assert.Equal(0, a.Updates);
            Assert.Equal(a.Days.ToArray(), b.Days.ToArray());
            Assert.NotEqual(Trainer(kind, 5, 0).Train().Days[0], Trainer(kind, 6, 0).Train().Days[0]); // exploring, they differ
            Assert.Equal(96 * TwoDays.Households.Length, Trainer(kind, 5, 1).Train().Updates); // day 1 only
        }
        Assert.Equal(0, new TrainingOptions(LearnerKind.QLearning, EvaluationDays: 9).FirstEvaluationDay(2));
        Assert.Equal(2, new TrainingOptions(LearnerKind.QLearning).FirstEvaluationDay(2)); // default: no evaluation window
        Assert.Throws<ArgumentOutOfRangeException>(() => Trainer(LearnerKind.QLearning, 5, -1).Train());
    }

    [Fact]
    public void Savings_captured_is_the_share_of_the_gap_to_the_optimum()
    {
        // Hand-computed: no control 200 $/day, learner 170, optimum 150 → 100 × 30 / 50 = 60 %.
        Assert.Equal(60.0, TrainingSummary.SavingsCaptured(200, 170, 150)!.Value, 12);
        Assert.Equal(100.0, TrainingSummary.SavingsCaptured(200, 150, 150)!.Value, 12);
        Assert.Equal(-20.0, TrainingSummary.SavingsCaptured(200, 210, 150)!.Value, 12);
        Assert.Null(TrainingSummary.SavingsCaptured(150, 140, 150));
    }

    [Fact]
    public void Days_to_ninety_percent_uses_trailing_seven_day_means()
    {
        // No control 100 every day; learner saves 0, 0, 10, 10, ... 10 (10 days). Final savings: mean of days 4..10 = 10.
        // Trailing means: day 1: 0; day 2: 0; day 3: 10/3; day 4: 20/4 = 5; day 5: 30/5 = 6; day 6: 40/6 = 6.67;
        // day 7: 50/7 = 7.14; day 8: 60/7 = 8.57; day 9: 70/7 = 10 ≥ 9 → day 9.
        double[] nc = Enumerable.Repeat(100.0, 10).ToArray();
        double[] learner = [100, 100, 90, 90, 90, 90, 90, 90, 90, 90];
        Assert.Equal(9, TrainingSummary.DaysToNinety(learner, nc));
        Assert.Null(TrainingSummary.DaysToNinety(nc, nc)); // no savings
        Assert.Equal(1, TrainingSummary.DaysToNinety([90.0, 90, 90], [100.0, 100, 100]));
    }

    [Fact]
    public void Summary_averages_the_last_seven_days_and_writes_the_contract_fields()
    {
        static DayMetrics Day(int d, double cost, double peak) => new(d, cost, cost - 1, 1, peak, 0, 2, ProjectionCounts.None);
        var learner = Enumerable.Range(1, 10).Select(d => Day(d, d <= 3 ? 190 : 170, 100)).ToImmutableArray();
        var nc = Enumerable.Range(1, 10).Select(d => Day(d, 200, 125)).ToList();
        double[] oracle = Enumerable.Repeat(150.0, 10).ToArray();
        var run = new TrainingRun("actor-critic", learner, 960, 10, TimeSpan.FromSeconds(2));
        var s = TrainingSummary.Create("centralized", run, nc, oracle, "demo time-of-use", "default", 32, 7);
        Assert.Equal(7, s.Window);
        Assert.Equal(170, s.FinalDailyCost, 12);
        Assert.Equal(200, s.NoControlDailyCost, 12);
        Assert.Equal(150, s.OracleDailyCost!.Value, 12);
        Assert.Equal(60, s.SavingsCapturedPct!.Value, 9);
        Assert.Equal(20, s.PeakReductionPct, 9); // 100 × (1 − 100/125)
        Assert.Equal(20, s.Projections);
        // Savings 10, 10, 10, 30 ...: trailing means 10, 10, 10, 15, 18, 20, 21.4, 24.3, 27.1, 30; 90 % of 30 = 27 → day 9.
        Assert.Equal(9, s.DaysToNinetyPct);

        using var doc = JsonDocument.Parse(RunFolder.SummaryJson(s));
        var root = doc.RootElement;
        foreach (string field in (string[])["finalDailyCost", "noControlDailyCost", "oracleDailyCost", "savingsCapturedPct", "peakReductionPct",
                     "daysToNinetyPct", "days", "seed", "households", "finalPeakKw", "noControlPeakKw", "violationSlots", "projections", "decisionSteps"])
            Assert.Equal(JsonValueKind.Number, root.GetProperty(field).ValueKind);
        Assert.Equal("actor-critic", root.GetProperty("learner").GetString());
        Assert.Equal("demo time-of-use", root.GetProperty("tariff").GetString());
        Assert.Equal("centralized", root.GetProperty("mode").GetString());
        Assert.Equal(60, root.GetProperty("savingsCapturedPct").GetDouble(), 6);

        var without = TrainingSummary.Create("centralized", run, nc, null, "t", "default", 32, 7);
        using var doc2 = JsonDocument.Parse(RunFolder.SummaryJson(without));
        Assert.Equal(JsonValueKind.Null, doc2.RootElement.GetProperty("oracleDailyCost").ValueKind);
        Assert.Equal(JsonValueKind.Null, doc2.RootElement.GetProperty("savingsCapturedPct").ValueKind);
    }

    [Fact]
    public void Extra_fields_of_another_mode_follow_the_common_ones()
    {
        var days = ImmutableArray.Create(new DayMetrics(1, 10, 9, 1, 5, 0, 0, ProjectionCounts.None));
        var s = TrainingSummary.Create("federated", new TrainingRun("actor-critic", days, 96, 1, TimeSpan.Zero), days, null, "t", "s", 1, 1)
            with { Extra = [new("scheme", "plain"), new("rounds", 1)] };
        using var doc = JsonDocument.Parse(RunFolder.SummaryJson(s));
        Assert.Equal("plain", doc.RootElement.GetProperty("scheme").GetString());
        Assert.Equal(1, doc.RootElement.GetProperty("rounds").GetInt32());
    }

    [Fact]
    public void Daily_csv_has_one_row_per_day()
    {
        var days = new[] { new DayMetrics(1, 12.5, 10, 2.5, 99.25, 1, 3, ProjectionCounts.None) };
        string[] lines = RunFolder.DailyCsv(days).TrimEnd('\n').Split('\n');
        Assert.Equal("day,cost,bill,discomfort,peakKw,violationSlots,projections", lines[0]);
        Assert.Equal("1,12.5,10,2.5,99.25,1,3", lines[1]);
    }
}
