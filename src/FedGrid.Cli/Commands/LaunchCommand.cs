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
        var stepTimeout = HostOptions.StepTimeout();
        var state = new Option<string?>("--state") { Description = "run folder for checkpoints: the coordinator's in DIR/coordinator, each household's in DIR/<id> (plain and private-columns only)" };
        var cmd = new Command("launch", "Start a coordinator and N household processes on loopback, run, compare with the in-process run, shut everything down.");
        foreach (Option o in runOptions)
            cmd.Options.Add(o);
        cmd.Options.Add(json);
        cmd.Options.Add(insecure);
        cmd.Options.Add(stepTimeout);
        cmd.Options.Add(state);
        cmd.SetAction(async (parse, cancel) =>
        {
            HostedRunSettings run = read(parse);
            TimeSpan? step = HostOptions.Seconds(parse, stepTimeout);
            string? folder = parse.GetValue(state);
            if (folder is not null)
            {
                HostOptions.RequireCheckpointable(run);
                if (Directory.Exists(folder) && Directory.EnumerateFileSystemEntries(folder).Any())
                    throw new UserInputException($"--state {folder}: the folder is not empty; a launch starts a fresh run (resume a run with the coordinator verb's --resume)");
            }
            LaunchReport r;
            try
            {
                r = await Launcher.RunAsync(run, HostOptions.Self(), Console.Error, cancel, parse.GetValue(insecure),
                    step, folder is null ? null : Path.GetFullPath(folder));
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
