using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Cli.Commands;

/// <summary>Options of <c>fedgrid demo</c>; null days and seed take the defaults (or, with a scenario file, the file's).</summary>
internal sealed record DemoOptions(int? Days, ulong? Seed, string? OutDir, bool Json, string? ScenarioPath = null, string? SaveScenarioPath = null);

/// <summary>
/// <c>fedgrid demo</c>: the embedded default scenario under the no-control and the price-rule
/// baselines, with an exact AC power flow every slot; writes a run folder (slots.csv,
/// summary.json, feeder-load.png).
/// </summary>
internal static class DemoCommand
{
    public const string Cautions =
        "Cautions: FedGrid is a simulation; it controls no equipment. Field use of any load-control policy must follow the " +
        "utility's demand-response program and interconnection rules and local electrical codes, and be reviewed by licensed " +
        "engineers; medically necessary and safety-related loads are never to be curtailed. Privacy figures are estimates under " +
        "a stated threat model and data, not a legal compliance finding.";

    /// <summary>Staggered restart of the rule after the peak: up to 3 h (12 slots).</summary>
    public const int RuleReleaseSpreadSlots = PriceThresholdPolicy.DefaultReleaseSpreadSlots;

    public static Command Create()
    {
        var days = new Option<int?>("--days") { Description = "days to simulate, 1 to 366 (default 7)" };
        var seed = new Option<ulong?>("--seed") { Description = $"seed of the households and their data (default {DefaultScenario.DefaultSeed})" };
        var outDir = new Option<string?>("--out") { Description = "run folder (default runs/demo-s<seed>-<days>d)" };
        var json = new Option<bool>("--json") { Description = "print only the summary as JSON on stdout" };
        var scenario = new Option<string?>("--scenario") { Description = "run a scenario file (fedgrid-scenario JSON) instead of the embedded default" };
        var save = new Option<string?>("--save-scenario") { Description = "write the default scenario (with --seed and --days) as a scenario file and stop" };
        var cmd = new Command("demo", "Run the embedded default scenario (invented 0.4 kV feeder, 32 households, time-of-use tariff) under the no-control and price-rule baselines.")
        {
            days, seed, outDir, json, scenario, save,
        };
        cmd.SetAction(parse => Run(new DemoOptions(parse.GetValue(days), parse.GetValue(seed), parse.GetValue(outDir), parse.GetValue(json),
            parse.GetValue(scenario), parse.GetValue(save)), Console.Out, Console.Error));
        return cmd;
    }

    /// <summary>Runs the demo; returns the exit code.</summary>
    public static int Run(DemoOptions options, TextWriter stdout, TextWriter stderr)
    {
        if (options.Days is < 1 or > 366)
            throw new UserInputException($"--days must be between 1 and 366, got {options.Days}");
        if (options.ScenarioPath is not null && (options.Days is not null || options.Seed is not null || options.SaveScenarioPath is not null))
            throw new UserInputException("--scenario takes days and seed from the file: drop --days, --seed and --save-scenario");
        if (options.SaveScenarioPath is not null)
            return SaveScenario(options, stdout);
        Scenario scenario = LoadScenario(options, stderr);
        int days = scenario.SlotCount / SlotCalendar.SlotsPerDay;
        string runName = options.ScenarioPath is null ? $"demo-s{scenario.Seed}-{days}d" : $"demo-{Path.GetFileNameWithoutExtension(options.ScenarioPath)}";
        string dir = Path.GetFullPath(options.OutDir ?? Path.Combine("runs", runName));
        try
        {
            Directory.CreateDirectory(dir);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new UserInputException($"--out: cannot create the run folder '{dir}': {e.Message}");
        }

        var env = new DemandResponseEnvironment(scenario);
        double threshold = PriceThresholdPolicy.ThresholdFor(scenario.Tariff, scenario.SlotCount);
        IDemandResponsePolicy[] policies = [new NoControlPolicy(), new PriceThresholdPolicy(threshold, RuleReleaseSpreadSlots)];
        var runs = new List<(RunSummary Summary, IReadOnlyList<SlotRecord> Slots)>();
        foreach (IDemandResponsePolicy policy in policies)
        {
            var (summary, slots) = PolicyRun.Run(env, policy, day => stderr.WriteLine($"demo: {policy.Name}: day {day}/{days}"));
            runs.Add((summary, slots));
        }

        string csvPath = Path.Combine(dir, "slots.csv");
        string jsonPath = Path.Combine(dir, "summary.json");
        string pngPath = Path.Combine(dir, "feeder-load.png");
        File.WriteAllText(csvPath, SlotsCsv(scenario, runs), new UTF8Encoding(false));
        byte[] summaryJson = SummaryJson(scenario, threshold, runs, dir);
        File.WriteAllBytes(jsonPath, summaryJson);
        File.WriteAllBytes(pngPath, DemoPlot.FeederLoadPng(scenario, runs));
        stderr.WriteLine($"demo: wrote {dir}");

        if (options.Json)
        {
            stdout.WriteLine(Encoding.UTF8.GetString(summaryJson));
            return CliRunner.ExitOk;
        }
        var net = scenario.Feeder.Network;
        stdout.WriteLine($"Scenario {scenario.Name}: feeder {scenario.Feeder.Name} ({scenario.Feeder.Buses.Count} buses, {scenario.Feeder.Buses[0].BaseKv:0.###} kV), {scenario.Households.Length} households, " +
                         $"{scenario.Tariff.Name}, {days} days from {scenario.Calendar.FirstDay}, seed {scenario.Seed}");
        stdout.WriteLine($"Limits: substation import {scenario.Feeder.Substation.ImportLimitKw:0} kW, voltage {net.VMinPu.Min():0.00}-{net.VMaxPu.Max():0.00} pu, cable ampacities");
        stdout.WriteLine();
        stdout.WriteLine($"{"baseline",-10} {"cost $/day",11} {"bill $",9} {"discomf. $",10} {"peak kW",8} {"viol. slots",11} {"losses kWh",10} {"min V pu",8}");
        foreach (var (s, _) in runs)
            stdout.WriteLine($"{s.Policy,-10} {s.DailyCostDollars,11:0.00} {s.BillDollars,9:0.00} {s.DiscomfortDollars,10:0.00} {s.PeakKw,8:0.0} {s.ViolationSlots,11} {s.LossesKwh,10:0.0} {s.MinVoltagePu,8:0.0000}");
        stdout.WriteLine();
        stdout.WriteLine($"rule = every household at its minimum flexible power while the price is at least {threshold:0.00} $/kWh, then a staggered restart over {RuleReleaseSpreadSlots * SlotCalendar.SlotHours:0.#} h, desired otherwise");
        stdout.WriteLine($"Run folder: {dir}");
        stdout.WriteLine($"  {Path.GetFileName(csvPath)}  {Path.GetFileName(jsonPath)}  {Path.GetFileName(pngPath)}");
        stdout.WriteLine();
        stdout.WriteLine(Cautions);
        return CliRunner.ExitOk;
    }

    private static string SlotsCsv(Scenario scenario, IReadOnlyList<(RunSummary Summary, IReadOnlyList<SlotRecord> Slots)> runs)
    {
        var ci = CultureInfo.InvariantCulture;
        var sb = new StringBuilder();
        sb.Append("slot,day,time,weekend,pricePerKwh");
        foreach (var (s, _) in runs)
            foreach (string c in (string[])["householdsKw", "flexibleKw", "importKw", "lossKw", "minVoltagePu", "minVoltageBus", "violations", "billDollars", "discomfortDollars"])
                sb.Append(',').Append(s.Policy).Append('.').Append(c);
        sb.Append('\n');
        int n = runs[0].Slots.Count;
        for (int t = 0; t < n; t++)
        {
            sb.Append(ci, $"{t},{SlotCalendar.DayOf(t)},{SlotCalendar.FormatClock(SlotCalendar.SlotOfDay(t))},{(scenario.Calendar.IsWeekend(t) ? 1 : 0)},{runs[0].Slots[t].PricePerKwh:0.####}");
            foreach (var (_, slots) in runs)
            {
                SlotRecord r = slots[t];
                sb.Append(ci, $",{r.HouseholdsKw:0.###},{r.FlexibleKw:0.###},{r.SubstationImportKw:0.###},{r.LossKw:0.####},{r.MinVoltagePu:0.######},{r.MinVoltageBus},{r.ViolationCount},{r.BillDollars:0.#####},{r.DiscomfortDollars:0.#####}");
            }
            sb.Append('\n');
        }
        return sb.ToString();
    }

    private static Scenario LoadScenario(DemoOptions options, TextWriter stderr)
    {
        if (options.ScenarioPath is null)
        {
            ulong seed = options.Seed ?? DefaultScenario.DefaultSeed;
            int days = options.Days ?? 7;
            stderr.WriteLine($"demo: building the default scenario (seed {seed}, {days} days)");
            return DefaultScenario.Create(seed, days);
        }
        stderr.WriteLine($"demo: reading scenario {options.ScenarioPath}");
        try
        {
            return ScenarioFile.Load(options.ScenarioPath, FedGrid.Grid.Feeders.FeederFile.Load);
        }
        catch (Exception e) when (e is ScenarioFileException or FedGrid.Households.Data.MeterDataException)
        {
            throw new UserInputException(e.Message);
        }
    }

    private static int SaveScenario(DemoOptions options, TextWriter stdout)
    {
        Scenario scenario = DefaultScenario.Create(options.Seed ?? DefaultScenario.DefaultSeed, options.Days ?? 7);
        string path = Path.GetFullPath(options.SaveScenarioPath!);
        try
        {
            using var stream = File.Create(path);
            ScenarioFile.Write(scenario, ScenarioFile.BuiltInDemoFeeder, stream);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new UserInputException($"--save-scenario: cannot write '{path}': {e.Message}");
        }
        if (!options.Json) stdout.WriteLine($"Wrote the default scenario to {path}; run it with: fedgrid demo --scenario {path}");
        return CliRunner.ExitOk;
    }

    private static byte[] SummaryJson(Scenario scenario, double threshold,
        IReadOnlyList<(RunSummary Summary, IReadOnlyList<SlotRecord> Slots)> runs, string dir)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("scenario", scenario.Name);
            w.WriteString("feeder", scenario.Feeder.Name);
            w.WriteNumber("households", scenario.Households.Length);
            w.WriteString("tariff", scenario.Tariff.Name);
            w.WriteNumber("seed", scenario.Seed);
            w.WriteNumber("days", scenario.SlotCount / SlotCalendar.SlotsPerDay);
            w.WriteString("currency", "$");
            w.WriteNumber("importLimitKw", scenario.Feeder.Substation.ImportLimitKw);
            w.WriteNumber("ruleThresholdPerKwh", threshold);
            w.WriteNumber("ruleReleaseSpreadSlots", RuleReleaseSpreadSlots);
            foreach (var (s, _) in runs)
            {
                w.WriteStartObject(s.Policy);
                w.WriteNumber("dailyCost", Math.Round(s.DailyCostDollars, 4));
                w.WriteNumber("bill", Math.Round(s.BillDollars, 4));
                w.WriteNumber("discomfort", Math.Round(s.DiscomfortDollars, 4));
                w.WriteNumber("peakKw", Math.Round(s.PeakKw, 3));
                w.WriteNumber("violationSlots", s.ViolationSlots);
                w.WriteNumber("lossesKwh", Math.Round(s.LossesKwh, 3));
                w.WriteNumber("minVoltagePu", Math.Round(s.MinVoltagePu, 6));
                w.WriteNumber("energyKwh", Math.Round(s.EnergyKwh, 3));
                w.WriteNumber("nonConvergedSlots", s.NonConvergedSlots);
                w.WriteEndObject();
            }
            w.WriteStartObject("files");
            w.WriteString("folder", dir);
            w.WriteString("slots", "slots.csv");
            w.WriteString("plot", "feeder-load.png");
            w.WriteEndObject();
            w.WriteString("cautions", Cautions);
            w.WriteEndObject();
        }
        return ms.ToArray();
    }
}
