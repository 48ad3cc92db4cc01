using System.CommandLine;
using System.Net;
using FedGrid.Hosting;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid coordinator</c>: the coordinator host; serves one run to its household processes, then exits (0 when the run completed).</summary>
internal static class CoordinatorCommand
{
    public static Command Create()
    {
        var (runOptions, read) = HostOptions.Create(householdsRequired: false);
        var port = new Option<int>("--port") { Description = "TCP port to listen on (0: any free port, printed)", DefaultValueFactory = _ => 5151 };
        var address = new Option<string>("--address") { Description = "address to listen on (default 127.0.0.1)", DefaultValueFactory = _ => "127.0.0.1" };
        var result = new Option<string?>("--result") { Description = "write the run's outcome (JSON) to this file, atomically" };
        var transcript = new Option<string?>("--transcript") { Description = "write the transcript (everything received, in order) to this file" };
        var timeout = new Option<double>("--round-timeout") { Description = "seconds a round waits for its uploads (default 60)", DefaultValueFactory = _ => 60 };
        var stepTimeout = HostOptions.StepTimeout();
        var json = new Option<bool>("--json") { Description = "print the outcome as JSON" };
        var state = new Option<string?>("--state") { Description = "run folder: a checkpoint (coordinator.ckpt) is written there atomically at every round end" };
        var resume = new Option<bool>("--resume") { Description = "continue the run from the checkpoint in --state (starts afresh when there is none); without it an existing checkpoint is refused" };
        var rejoin = new Option<double>("--rejoin-timeout") { Description = "seconds to wait for a household that lost its connection to rejoin before the run fails, or with --step-timeout before the step deadline drops it (default 300)", DefaultValueFactory = _ => 300 };
        var insecure = HostOptions.InsecureLoopback();
        var tls = HostOptions.Tls();
        var cmd = new Command("coordinator", "Run the coordinator host of a multi-process federated run (gRPC).");
        foreach (Option o in runOptions)
            cmd.Options.Add(o);
        cmd.Options.Add(port);
        cmd.Options.Add(address);
        cmd.Options.Add(result);
        cmd.Options.Add(transcript);
        cmd.Options.Add(timeout);
        cmd.Options.Add(stepTimeout);
        cmd.Options.Add(json);
        cmd.Options.Add(state);
        cmd.Options.Add(resume);
        cmd.Options.Add(rejoin);
        var hold = new Option<int>("--hold-after-checkpoint") { Description = "fault injection for tests: stop taking messages after the checkpoint of this round", DefaultValueFactory = _ => -1, Hidden = true };
        cmd.Options.Add(hold);
        cmd.Options.Add(insecure);
        cmd.Options.Add(tls);
        cmd.SetAction(async (parse, cancel) =>
        {
            string? folder = HostOptions.Transport(parse.GetValue(tls), parse.GetValue(insecure));
            if (!IPAddress.TryParse(parse.GetValue(address), out IPAddress? ip))
                throw new UserInputException($"--address: '{parse.GetValue(address)}' is not an IP address");
            if (folder is null && !IPAddress.IsLoopback(ip))
                throw new UserInputException($"--address {ip}: plain text is allowed on loopback only");
            TimeSpan roundTimeout = HostOptions.Seconds(parse, timeout);
            TimeSpan rejoinTimeout = HostOptions.Seconds(parse, rejoin);
            if (parse.GetValue(resume) && parse.GetValue(state) is null)
                throw new UserInputException("--resume needs --state DIR (the run folder holding the checkpoint)");
            TimeSpan? stepDeadline = HostOptions.Seconds(parse, stepTimeout);
            HostedRunSettings run = read(parse);
            if (parse.GetValue(state) is not null)
                HostOptions.RequireCheckpointable(run);
            var options = new CoordinatorHostOptions
            {
                Run = run, RoundTimeout = roundTimeout, TranscriptPath = parse.GetValue(transcript),
                StateFolder = parse.GetValue(state), Resume = parse.GetValue(resume), RejoinTimeout = rejoinTimeout,
                HoldAfterCheckpointRound = parse.GetValue(hold),
                StepTimeout = stepDeadline,
            };
            var app = CoordinatorHost.Build(options, ip, parse.GetValue(port), tlsFolder: folder);
            CoordinatorOutcome outcome = await CoordinatorHost.RunAsync(app, p => Console.Out.WriteLine($"coordinator: listening on {ip}:{p}"), cancel);
            if (parse.GetValue(result) is { } path)
                Launcher.WriteOutcome(outcome, path);
            Console.Out.WriteLine(outcome.Ok
                ? FormattableString.Invariant($"coordinator: {outcome.Steps} steps, {outcome.Rounds} rounds, {outcome.StepsPerSecond:0.0} steps/s, model {outcome.ModelSha256}")
                : $"coordinator: run failed: {outcome.Error}");
            return outcome.Ok ? CliRunner.ExitOk : CliRunner.ExitFailure;
        });
        return cmd;
    }
}
