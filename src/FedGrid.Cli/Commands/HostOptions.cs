using System.CommandLine;
using FedGrid.Hosting;
using FedGrid.Households;
using FedGrid.Households.Scenarios;

namespace FedGrid.Cli.Commands;

/// <summary>The run options shared by <c>coordinator</c>, <c>household</c> and <c>launch</c>: every process of a run must be given the same values.</summary>
internal static class HostOptions
{
    public const int DefaultDays = 1;

    public static (Option[] Options, Func<ParseResult, HostedRunSettings> Read) Create(bool householdsRequired)
    {
        var households = new Option<int>("--households") { Description = "households taking part: the first N of the default scenario's 32", Required = householdsRequired, DefaultValueFactory = _ => 32 };
        var days = new Option<int>("--days") { Description = $"simulated days (default {DefaultDays})", DefaultValueFactory = _ => DefaultDays };
        var seed = new Option<ulong>("--seed") { Description = $"seed of the households, their data and the learner (default {DefaultScenario.DefaultSeed})", DefaultValueFactory = _ => DefaultScenario.DefaultSeed };
        var round = new Option<int>("--steps-per-round") { Description = $"decision steps per round (default {SlotCalendar.SlotsPerDay}, one day)", DefaultValueFactory = _ => SlotCalendar.SlotsPerDay };
        var scheme = new Option<string>("--scheme") { Description = $"the scheme: {FedGrid.Federation.Schemes.FederationSchemes.NameList()} (default plain; the DP schemes with their default noise)", DefaultValueFactory = _ => FedGrid.Federation.Schemes.ClearScheme.PlainName };
        return ([households, days, seed, round, scheme], p =>
        {
            var s = new HostedRunSettings(p.GetValue(seed), p.GetValue(days), p.GetValue(households), p.GetValue(round), p.GetValue(scheme)!);
            try
            {
                s.Validate();
            }
            catch (ArgumentException e)
            {
                throw new UserInputException(e.Message.StartsWith("scheme", StringComparison.Ordinal) ? "--" + e.Message : e.Message);
            }
            return s;
        });
    }

    /// <summary>Refuses --state for a run whose scheme the checkpoints do not cover, as a user error before anything starts.</summary>
    public static void RequireCheckpointable(HostedRunSettings run)
    {
        try
        {
            run.RequireCheckpointable();
        }
        catch (ArgumentException e)
        {
            throw new UserInputException(e.Message);
        }
    }

    public static Option<bool> InsecureLoopback() => new("--insecure-loopback")
    {
        Description = "plain-text HTTP/2, allowed on a loopback address only (instead of --tls)",
    };

    public static Option<string?> Tls() => new("--tls")
    {
        Description = "folder of the run's certificates (fedgrid certificates): ca.crt and coordinator.pfx or <id>.pfx; mutual TLS",
    };

    /// <summary>The coordinator's step deadline (given to <c>coordinator</c>, and by <c>launch</c> to its coordinator).</summary>
    public static Option<double?> StepTimeout() => new("--step-timeout")
    {
        Description = "seconds a decision step waits, from its first message, before it drops the missing households for the round (default: wait for all; a household leaving ends the run)",
    };

    /// <summary>A duration option in seconds, which must be positive.</summary>
    public static TimeSpan Seconds(ParseResult parse, Option<double> option) =>
        Positive(option.Name, parse.GetValue(option));

    /// <summary>An optional duration option in seconds, which must be positive when given.</summary>
    public static TimeSpan? Seconds(ParseResult parse, Option<double?> option) =>
        parse.GetValue(option) is { } v ? Positive(option.Name, v) : null;

    private static TimeSpan Positive(string name, double seconds) =>
        seconds > 0 ? TimeSpan.FromSeconds(seconds) : throw new UserInputException($"{name} must be positive, got {seconds}");

    /// <summary>The certificate folder, or null for plain text; exactly one of --tls and --insecure-loopback.</summary>
    public static string? Transport(string? tls, bool insecure)
    {
        if ((tls is null) == !insecure)
            throw new UserInputException("give exactly one of --tls DIR (mutual TLS) and --insecure-loopback (plain text on loopback)");
        if (tls is not null && !File.Exists(Path.Combine(tls, ScenarioCertificates.CaFile)))
            throw new UserInputException($"--tls {tls}: no {ScenarioCertificates.CaFile} there (make the folder with fedgrid certificates)");
        return tls;
    }

    /// <summary>The command that starts this very executable (the apphost, or dotnet and the dll).</summary>
    public static IReadOnlyList<string> Self()
    {
        string process = Environment.ProcessPath ?? throw new InvalidOperationException("no process path");
        string name = Path.GetFileNameWithoutExtension(process);
        if (name.Equals("dotnet", StringComparison.OrdinalIgnoreCase))
            return [process, typeof(HostOptions).Assembly.Location];
        return [process];
    }
}
