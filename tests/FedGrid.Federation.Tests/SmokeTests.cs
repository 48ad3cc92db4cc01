using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;
using Xunit.Abstractions;

namespace FedGrid.Federation.Tests;

public sealed class SmokeTests(ITestOutputHelper output)
{
    [Fact]
    public void TwoDaysOfPlainRun()
    {
        var scenario = DefaultScenario.Create(DefaultScenario.DefaultSeed, 6);
        string dir = Directory.CreateTempSubdirectory("fedgrid-smoke").FullName;
        var fed = new FederationOptions { Learning = TrainingDefaults.ActorCritic };
        var run = new InProcessFederation(scenario, new FederatedRunOptions
        {
            Scheme = ClearScheme.Plain(), Federation = fed,
            TranscriptPath = Path.Combine(dir, "transcript.fgt"), GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        });
        var sw = System.Diagnostics.Stopwatch.StartNew(); FederatedRunResult r = run.Run(d => output.WriteLine($"{sw.Elapsed.TotalSeconds:0.00}s day {d.Day} cost {d.Cost:0.00} projections {d.Projections} violations {d.ViolationSlots}"));
        output.WriteLine($"{r.Run.Elapsed.TotalSeconds:0.00} s, rounds {r.Rounds}, transcript {r.TranscriptBytes} B, {r.TranscriptRecords} records, {r.BytesPerHouseholdPerStep:0} B/household/step");
        Assert.Equal(6, r.Rounds);
    }
}
