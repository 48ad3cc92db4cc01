using System.Globalization;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Hosting;

namespace FedGrid.Hosting.Tests;

/// <summary>Kill tests with real OS processes: the coordinator SIGKILLed after a round-end checkpoint and resumed; a household SIGKILLed while the round waits for its upload and restarted.</summary>
public sealed class ResumeTests
{
    private static readonly HostedRunSettings Small = HostedRunTests.Small; // 3 households, 1 day, 4 rounds of 24 steps

    internal static string[] Coordinator(HostedRunSettings run, string folder, int port, params string[] extra) =>
    [
        "coordinator", .. run.ToArguments(), "--port", port.ToString(CultureInfo.InvariantCulture), "--insecure-loopback",
        "--state", Path.Combine(folder, "coordinator"), "--result", Path.Combine(folder, "result.json"), "--transcript", Path.Combine(folder, "run.fgt"), .. extra,
    ];

    internal static string[] Household(HostedRunSettings run, string folder, string id, string address, params string[] extra) =>
        ["household", .. run.ToArguments(), "--id", id, "--coordinator", address, "--insecure-loopback", "--state", Path.Combine(folder, "households"), .. extra];

    [Fact]
    public async Task CoordinatorKilledAfterACheckpointResumesAndEndsWithTheUninterruptedModelBitForBit()
    {
        using var run = new ProcessRun("fedgrid-resume-");
        string folder = run.Folder;
        int port = run.Port;
        // The coordinator writes the checkpoint of round 2 (after aggregating rounds 0 and 1), then takes no more
        // messages: the households already have the round-2 model and send their first partial sums into the void.
        var first = run.Start("coordinator", Coordinator(Small, folder, port, "--hold-after-checkpoint", "2"));
        await first.WaitForLine("listening on", TimeSpan.FromSeconds(60));
        var households = Small.CreateScenario().Households.Select(h => run.Start(h.Id, Household(Small, folder, h.Id, run.Address))).ToList();
        await first.WaitForLine("holding after the checkpoint of round 2", TimeSpan.FromSeconds(120));
        first.Kill(); // SIGKILL
        Assert.True(File.Exists(Path.Combine(folder, "coordinator", CoordinatorEngine.CheckpointFileName)));
        Assert.False(File.Exists(Path.Combine(folder, "result.json")));

        // Without --resume a run folder holding a checkpoint is refused.
        var refused = run.Start("coordinator-refused", Coordinator(Small, folder, Launcher.FreeLoopbackPort()));
        Assert.NotEqual(0, await refused.WaitForExit(TimeSpan.FromSeconds(60)));
        Assert.True(refused.Logged("resume it (--resume)"), refused.Output());

        var second = run.Start("coordinator-resumed", Coordinator(Small, folder, port, "--resume"));
        Assert.True(await second.WaitForExit(TimeSpan.FromMinutes(3)) == 0, run.Output());
        foreach (HostProcess h in households)
        {
            Assert.True(await h.WaitForExit(TimeSpan.FromMinutes(1)) == 0, h.Output());
            Assert.True(h.Logged("restored its checkpoint of round 1"), h.Output());
            Assert.True(h.Logged("finished after 96 steps"), h.Output());
        }
        Assert.True(second.Logged("resumed from"), second.Output());
        CoordinatorOutcome outcome = Launcher.ReadOutcome(Path.Combine(folder, "result.json"));
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(4, outcome.Rounds);
        Assert.Equal(4, outcome.AggregatedRounds);
        Assert.Equal(96, outcome.Steps);
        // The uninterrupted run (one process, same seed) gives the same model bit for bit.
        Assert.Equal(Convert.ToHexStringLower(Small.RunInProcess().ModelSha256), outcome.ModelSha256);

        // The transcript was cut back to the checkpoint and continued: whole, gap-free, completed, each round aggregated once.
        using TranscriptReader reader = TranscriptReader.Open(Path.Combine(folder, "run.fgt"));
        var records = reader.Records().ToList();
        Assert.Null(reader.Torn);
        Assert.True(reader.Completed);
        Assert.Equal(Enumerable.Range(0, records.Count).Select(i => (ulong)i), records.Select(r => r.Sequence));
        Assert.Equal([0, 1, 2, 3], records.Where(r => r.Event?.Kind == EventKind.RoundAggregated).Select(r => r.Round));
        // The rejoins of round 2 are on record: three join requests after admission.
        Assert.Equal(3, records.Count(r => r.Round == 2 && r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.Join));
    }

    [Fact]
    public async Task HouseholdKilledWhileTheRoundWaitsForItsUploadDropsOutAndRejoinsAtTheNextRoundStart()
    {
        using var run = new ProcessRun("fedgrid-dropout-");
        string folder = run.Folder, address = run.Address;
        var coordinator = run.Start("coordinator", Coordinator(Small, folder, run.Port, "--round-timeout", "12"));
        await coordinator.WaitForLine("listening on", TimeSpan.FromSeconds(60));
        var ids = Small.CreateScenario().Households.Select(h => h.Id).ToList();
        // H02 (index 1) hangs in round 1's local training phase, after its round-end checkpoint.
        var hung = run.Start("H02", Household(Small, folder, "H02", address, "--hold-upload-round", "1"));
        var others = ids.Where(id => id != "H02").Select(id => run.Start(id, Household(Small, folder, id, address))).ToList();
        await hung.WaitForLine("holding the upload of round 1", TimeSpan.FromSeconds(120));
        hung.Kill(); // SIGKILL while the coordinator waits for its upload
        var restarted = run.Start("H02-restarted", Household(Small, folder, "H02", address));

        Assert.True(await coordinator.WaitForExit(TimeSpan.FromMinutes(3)) == 0, run.Output());
        Assert.True(await restarted.WaitForExit(TimeSpan.FromMinutes(1)) == 0, restarted.Output());
        foreach (HostProcess h in others)
        {
            Assert.True(await h.WaitForExit(TimeSpan.FromMinutes(1)) == 0, h.Output());
        }
        Assert.True(restarted.Logged("restored its checkpoint of round 1"), restarted.Output());
        Assert.True(restarted.Logged("finished after 96 steps"), restarted.Output());
        Assert.True(coordinator.Logged("rejoined at the start of round 2"), coordinator.Output());
        CoordinatorOutcome outcome = Launcher.ReadOutcome(Path.Combine(folder, "result.json"));
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(4, outcome.AggregatedRounds); // round 1 closed at its deadline with 2 of 3 uploads, above the quorum of 1
        Assert.Equal(96, outcome.Steps);

        using TranscriptReader reader = TranscriptReader.Open(Path.Combine(folder, "run.fgt"));
        var records = reader.Records().ToList();
        Assert.True(reader.Completed);
        TranscriptRecord dropout = Assert.Single(records, r => r.Event?.Kind == EventKind.Dropout);
        Assert.Equal(1, dropout.Round);
        Assert.Equal([1], dropout.Event.Households);
        TranscriptRecord aggregated = Assert.Single(records, r => r.Round == 1 && r.Event?.Kind == EventKind.RoundAggregated);
        Assert.Equal([0, 2], aggregated.Event.Households);
        // The rejoin came at the start of round 2, before any of its partial sums were taken.
        int rejoin = records.FindIndex(r => r.Round == 2 && r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.Join);
        int firstSums = records.FindIndex(r => r.Round == 2 && r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums);
        Assert.InRange(rejoin, 0, firstSums);
    }
}
