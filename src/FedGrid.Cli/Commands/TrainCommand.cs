using System.CommandLine;
using System.Text;
using FedGrid.Charts;
using FedGrid.Federation.Training;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Tariffs;

namespace FedGrid.Cli.Commands;

/// <summary>Options of <c>fedgrid train</c>; null values take the defaults (or, with a scenario file, the file's).</summary>
internal sealed record TrainOptions(string Mode, string Learner, string? ScenarioPath = null, string? Tariff = null, int? Days = null,
    ulong? Seed = null, string? OutDir = null, bool Json = false, FederatedTrainOptions? Federated = null, int? WarmStartDays = null,
    int? EvaluationDays = null, string? WarmStartRule = null);

/// <summary>What a training mode hands back to the command for writing the run folder.</summary>
/// <param name="Run">The learner's run.</param>
/// <param name="Summary">Its summary against the baselines.</param>
/// <param name="NoControl">No control on the same days.</param>
/// <param name="OracleDailyCost">The daily optimum on the same days, or null.</param>
/// <param name="ExtraFiles">Further files the mode wrote into the folder (name → file name).</param>
internal sealed record TrainOutcome(TrainingRun Run, TrainingSummary Summary, IReadOnlyList<DayMetrics> NoControl, IReadOnlyList<double>? OracleDailyCost,
    IReadOnlyList<KeyValuePair<string, string>> ExtraFiles);

/// <summary>Everything a training mode gets from the command line.</summary>
internal sealed record TrainContext(Scenario Scenario, LearnerKind Learner, ulong Seed, string Folder, TextWriter Progress,
    FederatedTrainOptions? Federated = null, int? WarmStartDays = null, int? EvaluationDays = null, WarmStartRule? Rule = null)
{
    /// <summary>The actor-critic's warm-start days in a run of <paramref name="days"/> days (the default when not given, at most the run).</summary>
    /// <param name="days">Days of the run.</param>
    /// <returns>Days the price rule acts.</returns>
    public int WarmStartDaysOf(int days) => Math.Min(days, WarmStartDays ?? TrainingDefaults.WarmStartDays);
}

/// <summary>
/// <c>fedgrid train --mode centralized --learner actor-critic|q-learning|double-q</c>: trains a learner on the
/// embedded default scenario (or a scenario file), with the safety projection every slot, and writes a run folder
/// (daily.csv, summary.json, convergence.png). Modes are listed in <see cref="Modes"/>; another mode adds one line there.
/// </summary>
internal static class TrainCommand
{
    public const int DefaultDays = 60;
    public const string TimeOfUse = "time-of-use";
    public const string RealTime = "real-time";

    /// <summary>The training modes: name → runner.</summary>
    public static readonly IReadOnlyList<KeyValuePair<string, Func<TrainContext, TrainOutcome>>> Modes =
    [
        new("centralized", RunCentralized),
        new("federated", TrainFederated.Run),
    ];

    public static Command Create()
    {
        var mode = new Option<string>("--mode") { Description = $"training mode: {string.Join(", ", Modes.Select(m => m.Key))}", Required = true };
        var learner = new Option<string>("--learner") { Description = "learner: actor-critic, q-learning or double-q", DefaultValueFactory = _ => "actor-critic" };
        var scenario = new Option<string?>("--scenario") { Description = "train on a scenario file (fedgrid-scenario JSON) instead of the embedded default" };
        var tariff = new Option<string?>("--tariff") { Description = $"{TimeOfUse} (default scenario's) or {RealTime} (seeded prices); default: the scenario's own" };
        var days = new Option<int?>("--days") { Description = $"training budget in simulated days, 1 to 366 (default {DefaultDays})" };
        var seed = new Option<ulong?>("--seed") { Description = $"seed of the households, their data and the learner (default {DefaultScenario.DefaultSeed})" };
        var outDir = new Option<string?>("--out") { Description = "run folder (default runs/train-<mode>-<learner>-<tariff>-s<seed>-<days>d)" };
        var json = new Option<bool>("--json") { Description = "print only the summary as JSON on stdout" };
        var warm = new Option<int?>("--warm-start-days")
        {
            Description = $"actor-critic (centralized or federated): days the price rule acts before the learner clones it and takes over (federated: each household on its own rows), 0 = none (default {TrainingDefaults.WarmStartDays})",
        };
        var evaluation = new Option<int?>("--evaluation-days")
        {
            Description = $"centralized: last days on which the learner acts on what it learned, without exploring or learning (default {TrainingDefaults.EvaluationDays}; {TrainingSummary.FinalWindowDays} makes the final window an evaluation of the trained policy)",
        };
        var rule = new Option<string?>("--warm-start-rule")
        {
            Description = $"centralized actor-critic: the warm start's price rule with time-of-use prices: {WarmStartRuleNames.Of(WarmStartRule.Peak)} (hold flexible load at minimum at the peak price) or {WarmStartRuleNames.Of(WarmStartRule.CheapestPeriod)} (at every price above the cheapest) (default {WarmStartRuleNames.Of(TrainingDefaults.CentralizedWarmStartRule)}; the federated warm start uses {WarmStartRuleNames.Of(WarmStartRule.Peak)})",
        };
        var (fedOptions, readFed) = TrainFederated.CreateOptions();
        var cmd = new Command("train", "Train a demand-response learner on the default scenario (or a scenario file) with the safety projection every slot; compare it with no control and the daily optimum on the same days.")
        {
            mode, learner, scenario, tariff, days, seed, outDir, json, warm, evaluation, rule,
        };
        foreach (Option o in fedOptions) cmd.Options.Add(o);
        cmd.SetAction(parse => Run(new TrainOptions(parse.GetValue(mode)!, parse.GetValue(learner)!, parse.GetValue(scenario), parse.GetValue(tariff),
            parse.GetValue(days), parse.GetValue(seed), parse.GetValue(outDir), parse.GetValue(json), readFed(parse),
            parse.GetValue(warm), parse.GetValue(evaluation), parse.GetValue(rule)), Console.Out, Console.Error));
        return cmd;
    }

    /// <summary>Runs the command; returns the exit code.</summary>
    public static int Run(TrainOptions options, TextWriter stdout, TextWriter stderr)
    {
        var runner = Modes.FirstOrDefault(m => m.Key == options.Mode).Value
            ?? throw new UserInputException($"--mode: unknown mode '{options.Mode}'; available: {string.Join(", ", Modes.Select(m => m.Key))}");
        LearnerKind learner = LearnerNames.Parse(options.Learner)
            ?? throw new UserInputException($"--learner: unknown learner '{options.Learner}'; use actor-critic, q-learning or double-q");
        if (options.Tariff is not null and not TimeOfUse and not RealTime)
            throw new UserInputException($"--tariff: unknown tariff '{options.Tariff}'; use {TimeOfUse} or {RealTime}");
        TrainFederated.Validate(options);
        if (options.Days is < 1 or > 366)
            throw new UserInputException($"--days must be between 1 and 366, got {options.Days}");
        if (options.WarmStartDays is { } w && (w < 0 || learner != LearnerKind.ActorCritic))
            throw new UserInputException(w < 0 ? $"--warm-start-days must be 0 or more, got {w}"
                : "--warm-start-days applies to --learner actor-critic only");
        if (options.EvaluationDays is { } ev && (ev < 0 || options.Mode != "centralized"))
            throw new UserInputException(ev < 0 ? $"--evaluation-days must be 0 or more, got {ev}"
                : "--evaluation-days applies to --mode centralized only");
        WarmStartRule? warmRule = options.WarmStartRule is not { } ruleName ? null : WarmStartRuleNames.Parse(ruleName)
            ?? throw new UserInputException($"--warm-start-rule: unknown rule '{ruleName}'; use {WarmStartRuleNames.Of(FedGrid.Federation.Training.WarmStartRule.Peak)} or {WarmStartRuleNames.Of(FedGrid.Federation.Training.WarmStartRule.CheapestPeriod)}");
        if (warmRule is not null && (options.Mode != "centralized" || learner != LearnerKind.ActorCritic))
            throw new UserInputException("--warm-start-rule applies to --mode centralized --learner actor-critic only");
        if (options.ScenarioPath is not null && options.Days is not null)
            throw new UserInputException("--scenario takes its days from the file: drop --days");

        Scenario scenario = LoadScenario(options, stderr);
        ulong seed = options.Seed ?? scenario.Seed;
        int days = scenario.SlotCount / SlotCalendar.SlotsPerDay;
        string tariffKey = scenario.Tariff is RealTimeTariff ? RealTime : TimeOfUse;
        string runName = options.ScenarioPath is null
            ? $"train-{TrainFederated.ModeLabel(options)}-{options.Learner}-{tariffKey}-s{seed}-{days}d"
            : $"train-{TrainFederated.ModeLabel(options)}-{options.Learner}-{Path.GetFileNameWithoutExtension(options.ScenarioPath)}";
        string dir = Path.GetFullPath(options.OutDir ?? Path.Combine("runs", runName));
        try
        {
            Directory.CreateDirectory(dir);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new UserInputException($"--out: cannot create the run folder '{dir}': {e.Message}");
        }

        TrainOutcome outcome = runner(new TrainContext(scenario, learner, seed, dir, stderr, options.Federated, options.WarmStartDays, options.EvaluationDays, warmRule));
        var files = new List<KeyValuePair<string, string>> { new("folder", dir), new("daily", "daily.csv"), new("plot", "convergence.png") };
        files.AddRange(outcome.ExtraFiles);
        byte[] json = RunFolder.Write(dir, outcome.Run.Days, outcome.Summary, files, DemoCommand.Cautions);
        File.WriteAllBytes(Path.Combine(dir, "convergence.png"), ConvergencePng(outcome));
        stderr.WriteLine($"train: wrote {dir}");

        if (options.Json)
        {
            stdout.WriteLine(Encoding.UTF8.GetString(json));
            return CliRunner.ExitOk;
        }
        TrainingSummary s = outcome.Summary;
        stdout.WriteLine($"Trained {s.Learner} ({s.Mode}) on scenario {s.Scenario}: {s.Households} households, {scenario.Tariff.Name}, {s.Days} days, seed {s.Seed}, " +
                         $"{s.TrainingSeconds:0.0} s ({s.DecisionSteps / Math.Max(1e-9, s.TrainingSeconds):0} decision steps/s)");
        stdout.WriteLine($"Last {s.Window} days, mean per day:");
        stdout.WriteLine($"  {"",-12} {"cost $/day",11} {"peak kW",8}");
        stdout.WriteLine($"  {s.Learner,-12} {s.FinalDailyCost,11:0.00} {s.FinalPeakKw,8:0.0}");
        stdout.WriteLine($"  {"no control",-12} {s.NoControlDailyCost,11:0.00} {s.NoControlPeakKw,8:0.0}");
        stdout.WriteLine(s.OracleDailyCost is { } o ? $"  {"optimum",-12} {o,11:0.00}" : "  optimum      (not computed)");
        stdout.WriteLine($"Savings captured: {(s.SavingsCapturedPct is { } p ? $"{p:0.0} %" : "n/a")}; peak reduction {s.PeakReductionPct:0.0} %; " +
                         $"90 % of the final savings on day {(s.DaysToNinetyPct?.ToString(System.Globalization.CultureInfo.InvariantCulture) ?? "n/a")}");
        stdout.WriteLine($"Slots with violations: {s.ViolationSlots} (no control {s.NoControlViolationSlots}); projections {s.Projections}");
        if (s.Epsilon is { } eps)
            stdout.WriteLine($"Differential privacy: ε = {eps:G4} at δ = {s.Delta:G3} per household (partial sums and uploads, not the projection inputs; a bound under the README's assumptions)");
        stdout.WriteLine($"Run folder: {dir}");
        stdout.WriteLine("  daily.csv  summary.json  convergence.png");
        stdout.WriteLine();
        stdout.WriteLine(DemoCommand.Cautions);
        return CliRunner.ExitOk;
    }

    /// <summary>The baselines every mode is scored against: no control on every day, the daily optimum on the final window.</summary>
    internal static (IReadOnlyList<DayMetrics> NoControl, IReadOnlyList<double> Oracle) Baselines(TrainContext c)
    {
        int days = c.Scenario.SlotCount / SlotCalendar.SlotsPerDay;
        c.Progress.WriteLine($"train: no control on the same {days} days");
        var noControl = NoControlBaseline.Run(c.Scenario);
        int window = Math.Min(TrainingSummary.FinalWindowDays, days);
        c.Progress.WriteLine($"train: perfect-foresight optimum of the last {window} days (from no control's state at their first midnight)");
        IReadOnlyList<double> oracle = OracleBaseline.LastDays(c.Scenario, window, k => c.Progress.WriteLine($"train: optimum: day {k}/{window}"));
        return (noControl, oracle);
    }

    private static TrainOutcome RunCentralized(TrainContext c)
    {
        int days = c.Scenario.SlotCount / SlotCalendar.SlotsPerDay;
        var (noControl, oracle) = Baselines(c);
        var trainOptions = new TrainingOptions(c.Learner, c.Seed, WarmStartDays: c.WarmStartDays, EvaluationDays: c.EvaluationDays, Rule: c.Rule);
        var trainer = new CentralizedTrainer(c.Scenario, trainOptions);
        string name = LearnerNames.Of(c.Learner);
        TrainingRun run = trainer.Train(d => c.Progress.WriteLine(
            FormattableString.Invariant($"train: {name}: day {d.Day}/{days} cost {d.Cost:0.00} $ (no control {noControl[d.Day - 1].Cost:0.00}) peak {d.PeakKw:0.0} kW projections {d.Projections}")));
        var summary = TrainingSummary.Create("centralized", run, noControl, oracle, c.Scenario.Tariff.Name, c.Scenario.Name, c.Scenario.Households.Length, c.Seed);
        var extra = new List<KeyValuePair<string, object>>();
        if (c.Learner == LearnerKind.ActorCritic)
        {
            extra.Add(new("warmStartDays", c.WarmStartDaysOf(days)));
            extra.Add(new("warmStartRule", WarmStartRuleNames.Of(c.Rule ?? TrainingDefaults.CentralizedWarmStartRule)));
        }
        extra.Add(new("evaluationDays", days - trainOptions.FirstEvaluationDay(days)));
        summary = summary with { Extra = extra };
        return new TrainOutcome(run, summary, noControl, oracle, []);
    }

    private static Scenario LoadScenario(TrainOptions options, TextWriter stderr)
    {
        Scenario scenario;
        if (options.ScenarioPath is null)
        {
            ulong seed = options.Seed ?? DefaultScenario.DefaultSeed;
            int days = options.Days ?? DefaultDays;
            stderr.WriteLine($"train: building the default scenario (seed {seed}, {days} days)");
            scenario = DefaultScenario.Create(seed, days);
        }
        else
        {
            stderr.WriteLine($"train: reading scenario {options.ScenarioPath}");
            try
            {
                scenario = ScenarioFile.Load(options.ScenarioPath, FedGrid.Grid.Feeders.FeederFile.Load);
            }
            catch (Exception e) when (e is ScenarioFileException or FedGrid.Households.Data.MeterDataException)
            {
                throw new UserInputException(e.Message);
            }
        }
        return options.Tariff switch
        {
            RealTime => scenario with { Tariff = RealTimeTariff.Generate("demo real-time", new RealTimePriceModel(), scenario.SlotCount, scenario.Seed) },
            TimeOfUse when scenario.Tariff is not TimeOfUseTariff => scenario with { Tariff = DefaultScenario.CreateTariff(scenario.Calendar) },
            _ => scenario,
        };
    }

    private static byte[] ConvergencePng(TrainOutcome o)
    {
        int n = o.Run.Days.Length;
        var xs = new double[n];
        var learner = new double[n];
        var noControl = new double[n];
        for (int d = 0; d < n; d++)
        {
            xs[d] = d + 1;
            learner[d] = o.Run.Days[d].Cost;
            noControl[d] = o.NoControl[d].Cost;
        }
        var series = new List<Series> { new(o.Summary.Learner, xs, learner), new("no control", xs, noControl) };
        if (o.OracleDailyCost is { } oracle)
            series.Add(new Series("daily optimum", xs, oracle.ToArray()));
        var chart = new Chart($"{o.Summary.Learner} ({o.Summary.Mode}), {o.Summary.Tariff}: daily cost while training", "day", "bill + discomfort [$/day]", series);
        return PngChartRenderer.Render(chart, 1000, 480);
    }
}
