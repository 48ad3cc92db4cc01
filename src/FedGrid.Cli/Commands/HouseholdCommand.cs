using System.CommandLine;
using FedGrid.Hosting;
using Microsoft.Extensions.Logging;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid household</c>: one household's host (a home gateway); holds only its own data, derived from the scenario, the seed and its id.</summary>
internal static class HouseholdCommand
{
    public static Command Create()
    {
        var (runOptions, read) = HostOptions.Create(householdsRequired: false);
        var id = new Option<string>("--id") { Description = "the household's id (e.g. H01)", Required = true };
        var coordinator = new Option<string>("--coordinator") { Description = "the coordinator's address, e.g. http://127.0.0.1:5151", Required = true };
        var state = new Option<string?>("--state") { Description = "folder of the household's own round-end checkpoints (needed to rejoin after a lost connection or a restart)" };
        var reconnect = new Option<double>("--reconnect-window") { Description = "seconds to keep reconnecting without progress before giving up (default 300)", DefaultValueFactory = _ => 300 };
        var hold = new Option<int>("--hold-upload-round") { Description = "fault injection for tests: hang instead of uploading in this round (after the checkpoint)", DefaultValueFactory = _ => -1, Hidden = true };
        var insecure = HostOptions.InsecureLoopback();
        var tls = HostOptions.Tls();
        var cmd = new Command("household", "Run one household host of a multi-process federated run (gRPC client).");
        foreach (Option o in runOptions)
            cmd.Options.Add(o);
        cmd.Options.Add(id);
        cmd.Options.Add(coordinator);
        cmd.Options.Add(state);
        cmd.Options.Add(reconnect);
        cmd.Options.Add(hold);
        cmd.Options.Add(insecure);
        cmd.Options.Add(tls);
        cmd.SetAction(async (parse, cancel) =>
        {
            string? folder = HostOptions.Transport(parse.GetValue(tls), parse.GetValue(insecure));
            string scheme = folder is null ? "http" : "https";
            if (!Uri.TryCreate(parse.GetValue(coordinator), UriKind.Absolute, out Uri? address) || address.Scheme != scheme)
                throw new UserInputException($"--coordinator: '{parse.GetValue(coordinator)}' is not an {scheme}:// address");
            if (folder is null && !address.IsLoopback)
                throw new UserInputException($"--coordinator {address}: plain text is allowed on loopback only");
            using ILoggerFactory logs = LoggerFactory.Create(b => b.AddSimpleConsole(o => { o.SingleLine = true; o.TimestampFormat = "HH:mm:ss.fff "; }).SetMinimumLevel(LogLevel.Information));
            HostedRunSettings run = read(parse);
            if (parse.GetValue(state) is not null)
                HostOptions.RequireCheckpointable(run);
            HouseholdHost host;
            try
            {
                TimeSpan window = HostOptions.Seconds(parse, reconnect);
                host = new HouseholdHost(run, parse.GetValue(id)!, logs.CreateLogger("FedGrid.Household"))
                {
                    StateFolder = parse.GetValue(state), ReconnectWindow = window, HoldUploadInRound = parse.GetValue(hold),
                };
            }
            catch (ArgumentException e)
            {
                throw new UserInputException($"--id: {e.Message}");
            }
            await host.RunAsync(address, cancel, folder);
            return CliRunner.ExitOk;
        });
        return cmd;
    }
}
