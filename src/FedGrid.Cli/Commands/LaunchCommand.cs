using System.CommandLine;
using System.Text.Json;
using FedGrid.Hosting;

namespace FedGrid.Cli.Commands;

/// <summary>
/// <c>fedgrid launch</c>: one coordinator and N household processes on loopback over mutual TLS with a fresh scenario
/// CA (plain text with --insecure-loopback), the result compared with the same run in one process. Exit code 0 when
/// the models match.
/// </summary>
internal static class LaunchCommand
{
    public static Command Create()
    {
        var (runOptions, read) = HostOptions.Create(householdsRequired: true);
        var json = new Option<bool>("--json") { Description = "print one JSON object instead of a summary" };
        var insecure = HostOptions.InsecureLoopback();
        var cmd = new Command("launch", "Start a coordinator and N household processes on loopback, run, compare with the in-process run, shut everything down.");
        foreach (Option o in runOptions)
            cmd.Options.Add(o);
        cmd.Options.Add(json);
        cmd.Options.Add(insecure);
        cmd.SetAction(async (parse, cancel) =>
        {
            HostedRunSettings run = read(parse);
            LaunchReport r;
            try
            {
                r = await Launcher.RunAsync(run, HostOptions.Self(), Console.Error, cancel, parse.GetValue(insecure));
            }
            catch (Exception e) when (e is InvalidOperationException or TimeoutException)
            {
                Console.Error.WriteLine($"fedgrid: launch failed: {e.Message} (every process was stopped)");
                return CliRunner.ExitFailure;
            }
            Console.Out.Write(parse.GetValue(json) ? ToJson(r) : ToSummary(r));
            return r.MatchesInProcess ? CliRunner.ExitOk : CliRunner.ExitFailure;
        });
        return cmd;
    }

    internal static string ToJson(LaunchReport r)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteNumber("processes", r.Processes);
            w.WriteNumber("households", r.Outcome.Households);
            w.WriteNumber("steps", r.Outcome.Steps);
            w.WriteNumber("rounds", r.Outcome.Rounds);
            w.WriteString("finalModelSha256", r.Outcome.ModelSha256);
            w.WriteString("inProcessModelSha256", r.InProcessModelSha256);
            w.WriteBoolean("matchesInProcess", r.MatchesInProcess);
            w.WriteNumber("stepsPerSecond", Math.Round(r.Outcome.StepsPerSecond, 2));
            w.WriteNumber("bytesPerHouseholdPerStep", Math.Round(r.Outcome.BytesPerHouseholdPerStep, 1));
            w.WriteNumber("inProcessStepsPerSecond", Math.Round(r.InProcessStepsPerSecond, 2));
            w.WriteNumber("ratioToInProcess", Math.Round(r.RatioToInProcess, 4));
            w.WriteEndObject();
        }
        return System.Text.Encoding.UTF8.GetString(ms.ToArray()) + Environment.NewLine;
    }

    private static string ToSummary(LaunchReport r) => FormattableString.Invariant(
        $"Launched {r.Processes} processes: {r.Outcome.Steps} steps, {r.Outcome.Rounds} rounds, {r.Outcome.StepsPerSecond:0.0} steps/s, {r.Outcome.BytesPerHouseholdPerStep:0.0} bytes per household per step\n") + FormattableString.Invariant(
        $"final model {r.Outcome.ModelSha256}\nin-process  {r.InProcessModelSha256}\n{(r.MatchesInProcess ? "same model bit for bit" : "MODELS DIFFER")}\n");
}
