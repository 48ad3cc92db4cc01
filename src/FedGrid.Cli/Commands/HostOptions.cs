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
        return ([households, days, seed, round], p =>
        {
            var s = new HostedRunSettings(p.GetValue(seed), p.GetValue(days), p.GetValue(households), p.GetValue(round));
            try
            {
                s.Validate();
            }
            catch (ArgumentException e)
            {
                throw new UserInputException(e.Message);
            }
            return s;
        });
    }

    public static Option<bool> InsecureLoopback() => new("--insecure-loopback")
    {
        Description = "plain-text HTTP/2 on a loopback address (mutual TLS is not available yet, so this is required)",
    };

    public static void RequireInsecureLoopback(bool given)
    {
        if (!given)
            throw new UserInputException("mutual TLS is not available yet: pass --insecure-loopback to run plain text on loopback");
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
