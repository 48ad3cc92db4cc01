using FedGrid.Hosting;

namespace FedGrid.Bench.Versus;

/// <summary>
/// <c>hosting-loopback-32</c>: one day of the default scenario with 32 household processes and a coordinator process
/// over loopback (mutual TLS, the <c>fedgrid</c> executable started by <see cref="Launcher"/>) against the same run in
/// one process (<c>InProcessFederation</c>, the reference). Times are per decision step; agreement is 0 when the two
/// final models are equal bit for bit, 1 otherwise. Each repetition starts 33 processes, so the case runs once
/// whatever <c>--repeat</c> says. Goal (issue): at least 100 decision steps per second over loopback.
/// </summary>
internal sealed class HostingVersusCase : IVersusCase
{
    public string Name => "hosting-loopback-32";

    public VersusResult Run(int repetitions)
    {
        var run = new HostedRunSettings(Seed: FedGrid.Households.Scenarios.DefaultScenario.DefaultSeed, Days: 1, Households: 32);
        string dll = Path.Combine(AppContext.BaseDirectory, "fedgrid.dll");
        LaunchReport r = Launcher.RunAsync(run, ["dotnet", dll], TextWriter.Null, CancellationToken.None).GetAwaiter().GetResult();
        return new VersusResult(Name, 1000 / r.Outcome.StepsPerSecond, 1000 / r.InProcessStepsPerSecond, r.MatchesInProcess ? 0 : 1,
            new Dictionary<string, double>
            {
                ["processes"] = r.Processes,
                ["stepsPerSecond"] = r.Outcome.StepsPerSecond,
                ["inProcessStepsPerSecond"] = r.InProcessStepsPerSecond,
                ["ratioToInProcess"] = r.RatioToInProcess,
                ["bytesPerHouseholdPerStep"] = r.Outcome.BytesPerHouseholdPerStep,
            });
    }
}
