using System.CommandLine;
using System.Text;
using System.Text.Json;
using FedGrid.Households;
using FedGrid.Households.Optimum;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Cli.Commands;

/// <summary>Options of <c>fedgrid optimum</c>.</summary>
internal sealed record OptimumCommandOptions(int Days, ulong Seed, bool Json);

/// <summary>
/// <c>fedgrid optimum</c>: the perfect-foresight optimum of every day of the embedded default scenario (the lower
/// bound learners are scored against), next to the no-control and price-rule baselines of the same days.
/// </summary>
internal static class OptimumCommand
{
    public static Command Create()
    {
        var days = new Option<int>("--days") { Description = "days of the default scenario, 1 to 366 (default 7)", DefaultValueFactory = _ => 7 };
        var seed = new Option<ulong>("--seed") { Description = $"seed of the households and their data (default {DefaultScenario.DefaultSeed})", DefaultValueFactory = _ => DefaultScenario.DefaultSeed };
        var json = new Option<bool>("--json") { Description = "print only the figures as JSON on stdout" };
        var cmd = new Command("optimum", "Solve the perfect-foresight optimum of each day of the default scenario (convex program over 96 slots with the feeder's cone relaxation) and compare it with the baselines.")
        {
            days, seed, json,
        };
        cmd.SetAction(parse => Run(new OptimumCommandOptions(parse.GetValue(days), parse.GetValue(seed), parse.GetValue(json)), Console.Out, Console.Error));
        return cmd;
    }

    /// <summary>Runs the command; returns the exit code.</summary>
    public static int Run(OptimumCommandOptions options, TextWriter stdout, TextWriter stderr)
    {
        if (options.Days is < 1 or > 366)
            throw new UserInputException($"--days must be between 1 and 366, got {options.Days}");
        Scenario scenario = DefaultScenario.Create(options.Seed, options.Days);
        var env = new DemandResponseEnvironment(scenario);
        var optimum = new PerfectForesightOptimum(scenario);
        var days = optimum.Run(env, progress: d => stderr.WriteLine($"optimum: day {d}/{options.Days}"));
        env.Reset();
        stderr.WriteLine($"optimum: whole horizon ({scenario.SlotCount} slots) in one program");
        OptimumDay horizon = optimum.SolveWindow(env, scenario.SlotCount);
        double threshold = PriceThresholdPolicy.ThresholdFor(scenario.Tariff, scenario.SlotCount);
        double[] noControl = DailyCosts(env, new NoControlPolicy(), options.Days);
        double[] rule = DailyCosts(env, new PriceThresholdPolicy(threshold, DemoCommand.RuleReleaseSpreadSlots), options.Days);

        if (options.Json)
        {
            stdout.WriteLine(Encoding.UTF8.GetString(Json(scenario, days, horizon, noControl, rule)));
            return CliRunner.ExitOk;
        }
        stdout.WriteLine($"Perfect-foresight optimum, scenario {scenario.Name} (seed {scenario.Seed}), {scenario.Households.Length} households, feeder {scenario.Feeder.Name}");
        stdout.WriteLine($"{"day",3} {"status",-8} {"cost $",8} {"bill $",8} {"discomf. $",10} {"peak kW",8} {"solve ms",9} {"noControl $",11} {"rule $",8}");
        foreach (var (d, k) in days.Select((d, k) => (d, k)))
        {
            var o = d.Optimum;
            stdout.WriteLine($"{o.Day,3} {o.Status,-8} {o.CostDollars,8:0.00} {o.BillDollars,8:0.00} {o.DiscomfortDollars,10:0.00} {o.PeakKw,8:0.0} {o.SolveMs,9:0} {noControl[k],11:0.00} {rule[k],8:0.00}");
        }
        var first = days[0].Optimum;
        stdout.WriteLine();
        stdout.WriteLine($"Whole horizon in one program: {horizon.CostDollars:0.00} $ ({horizon.CostDollars / days.Length:0.00} $/day, {horizon.Status}, {horizon.SolveMs:0} ms, {horizon.Variables} variables) — " +
                         $"the lower bound of any policy's total; days one by one: {days.Sum(d => d.Optimum.CostDollars):0.00} $.");
        stdout.WriteLine($"Baselines: noControl {noControl.Sum():0.00} $, rule {rule.Sum():0.00} $.");
        stdout.WriteLine($"Program per day: {first.Variables} variables, {first.Constraints} constraint rows; largest cone relaxation gap {days.Max(d => d.Optimum.MaxRelaxationGapPu):0.0e+0} pu².");
        stdout.WriteLine("Each day starts from the state the replay of the previous day's optimum left (unfinished charging carried, as the environment does).");
        stdout.WriteLine("The cost is a lower bound for that day from that state; appliances are scheduled one by one (the environment's split rule is relaxed).");
        stdout.WriteLine();
        stdout.WriteLine(DemoCommand.Cautions);
        return CliRunner.ExitOk;
    }

    private static double[] DailyCosts(DemandResponseEnvironment env, IDemandResponsePolicy policy, int days)
    {
        var (_, slots) = PolicyRun.Run(env, policy);
        var cost = new double[days];
        foreach (SlotRecord s in slots) cost[SlotCalendar.DayOf(s.Slot)] += s.BillDollars + s.DiscomfortDollars;
        return cost;
    }

    private static byte[] Json(Scenario scenario, IReadOnlyList<OptimumDayRun> days, OptimumDay horizon, double[] noControl, double[] rule)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("scenario", scenario.Name);
            w.WriteNumber("seed", scenario.Seed);
            w.WriteNumber("households", scenario.Households.Length);
            w.WriteNumber("dayCount", days.Count);
            w.WriteNumber("oracleDailyCost", horizon.CostDollars / days.Count);
            w.WriteNumber("chainedDailyCost", days.Average(d => d.Optimum.CostDollars));
            w.WriteNumber("noControlDailyCost", noControl.Average());
            w.WriteNumber("ruleDailyCost", rule.Average());
            w.WriteNumber("maxRelaxationGapPu", days.Max(d => d.Optimum.MaxRelaxationGapPu));
            w.WriteStartArray("days");
            for (int k = 0; k < days.Count; k++)
            {
                var (o, r) = (days[k].Optimum, days[k].Replay);
                w.WriteStartObject();
                w.WriteNumber("day", o.Day);
                w.WriteString("status", o.Status.ToString());
                w.WriteNumber("costDollars", o.CostDollars);
                w.WriteNumber("billDollars", o.BillDollars);
                w.WriteNumber("discomfortDollars", o.DiscomfortDollars);
                w.WriteNumber("replayCostDollars", r.CostDollars);
                w.WriteNumber("peakKw", o.PeakKw);
                w.WriteNumber("violationSlots", r.ViolationSlots);
                w.WriteNumber("maxRelaxationGapPu", o.MaxRelaxationGapPu);
                w.WriteNumber("solveMs", o.SolveMs);
                w.WriteNumber("iterations", o.Iterations);
                w.WriteNumber("variables", o.Variables);
                w.WriteNumber("constraints", o.Constraints);
                w.WriteNumber("noControlCostDollars", noControl[k]);
                w.WriteNumber("ruleCostDollars", rule[k]);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteStartObject("horizon");
            w.WriteString("status", horizon.Status.ToString());
            w.WriteNumber("costDollars", horizon.CostDollars);
            w.WriteNumber("peakKw", horizon.PeakKw);
            w.WriteNumber("maxRelaxationGapPu", horizon.MaxRelaxationGapPu);
            w.WriteNumber("solveMs", horizon.SolveMs);
            w.WriteNumber("iterations", horizon.Iterations);
            w.WriteNumber("variables", horizon.Variables);
            w.WriteNumber("constraints", horizon.Constraints);
            w.WriteEndObject();
            w.WriteString("cautions", DemoCommand.Cautions);
            w.WriteEndObject();
        }
        return ms.ToArray();
    }
}
