using System.Diagnostics;
using System.Text.Json;
using FedGrid.Hosting;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

public sealed class HostedRunTests
{
    // Small runs: 3 households, one day in rounds of 24 steps (4 rounds), so every phase (steps, training, broadcast) repeats.
    internal static readonly HostedRunSettings Small = new(Seed: 7, Days: 1, Households: 3, StepsPerRound: 24);

    [Fact]
    public void OwnViewHoldsOnlyTheHouseholdsOwnData()
    {
        var full = Small.CreateScenario();
        var (index, own) = HostedRunSettings.OwnView(full, "H02");
        Assert.Equal(1, index);
        Assert.Single(own.Households);
        Assert.Single(own.Traces);
        Assert.Equal("H02", own.Households[0].Id);
        Assert.Same(full.Traces[1], own.Traces[0]);
        Assert.Empty(own.FixedLoads);
        Assert.Throws<ArgumentException>(() => HostedRunSettings.OwnView(full, "H09"));
    }

    [Fact]
    public async Task HostsInOneProcessGiveTheInProcessModelBitForBit()
    {
        await using var c = await TestCoordinator.StartAsync(Small);
        var hosts = Small.CreateScenario().Households
            .Select(h => Task.Run(() => new HouseholdHost(Small, h.Id, NullLogger.Instance).RunAsync(c.Address, CancellationToken.None))).ToArray();
        CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(2));
        await Task.WhenAll(hosts).WaitAsync(TimeSpan.FromMinutes(1));
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(96, outcome.Steps);
        Assert.Equal(4, outcome.Rounds);
        var (sha, inProcess) = Small.RunInProcess();
        Assert.Equal(Convert.ToHexStringLower(sha), outcome.ModelSha256);
        // The same envelopes cross as in the in-process runner, so the byte count agrees exactly.
        Assert.Equal(inProcess.WireBytes, outcome.WireBytes);
    }

    [Fact]
    public async Task AHouseholdThatLeavesMidRunIsDroppedAtTheStepDeadlineAndTheRunCompletes()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-step-timeout-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        // The leave can land mid-step (the step deadline drops it) or, on a loaded machine, at a round start, where the
        // coordinator first waits --rejoin-timeout for a lost connection; after that the step deadline drops it too.
        await using var c = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(5), stepTimeout: TimeSpan.FromSeconds(1), transcript: transcript,
            adjust: o => o with { RejoinTimeout = TimeSpan.FromSeconds(3) });
        Task[] hosts = await c.RunHouseholdsOneLeavingAt(Small, "H03", step: 30); // household H03's connection drops mid-run
        await AssertCompletedWithoutH03(c, hosts, transcript);
        Assert.True(c.Logged("deadline passed"));
    }

    /// <summary>A leave test's end: all 96 steps in 4 rounds, H03's host ended with an error, and the transcript drops it at a step deadline and aggregates without it.</summary>
    private static async Task<Exception> AssertCompletedWithoutH03(TestCoordinator c, Task[] hosts, string transcript)
    {
        var (outcome, left) = await c.CompletesWithout(hosts, left: 2, steps: 96, TimeSpan.FromMinutes(2));
        Assert.Equal(4, outcome.Rounds);
        using var reader = FedGrid.Federation.Transcripts.TranscriptReader.Open(transcript);
        var events = reader.Records().Where(r => r.Event is not null).Select(r => r.Event).ToList();
        Assert.Contains(events, e => e.Kind == FedGrid.Federation.Wire.EventKind.StepDropout && e.Households.SequenceEqual([2]));
        Assert.Contains(events, e => e.Kind == FedGrid.Federation.Wire.EventKind.RoundAggregated && !e.Households.Contains(2));
        return left;
    }

    [Fact]
    public async Task AHouseholdThatLeavesAtARoundStartIsWaitedForUpToTheRejoinTimeoutThenDroppedByTheStepDeadline()
    {
        // Regression: a household whose connection broke at a round start was waited for --rejoin-timeout (300 s by
        // default) and then failed the run, even with --step-timeout set; the leave-mid-run test hung whenever its
        // leave landed at a round start. Now the step deadline drops it once the rejoin window is over.
        string dir = Directory.CreateTempSubdirectory("fedgrid-round-start-leave-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        await using var c = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(5), stepTimeout: TimeSpan.FromSeconds(1), transcript: transcript,
            adjust: o => o with { RejoinTimeout = TimeSpan.FromSeconds(2) });
        int perRound = 96 / 4;
        Task[] hosts = [.. Small.CreateScenario().Households.Select(h => Task.Run(() =>
            new HouseholdHost(Small, h.Id, Microsoft.Extensions.Logging.Abstractions.NullLogger.Instance) { LeaveBeforeStep = h.Id == "H03" ? perRound : -1 }
                .RunAsync(c.Address, CancellationToken.None)))];
        Assert.IsAssignableFrom<OperationCanceledException>(await AssertCompletedWithoutH03(c, hosts, transcript));
        Assert.True(c.Logged("waiting up to 2 s for it to rejoin"));
        Assert.True(c.Logged("did not rejoin within 2 s; the step deadline drops it"));
    }

    [Fact]
    public async Task AHouseholdProcessKilledMidRunIsDroppedAndTheCoordinatorCompletesTheRun()
    {
        // Issue 8: "a household process killed (SIGKILL) mid-round: the coordinator times out, continues with the rest
        // above the quorum, records the dropout in the transcript". Real OS processes on loopback.
        using var run = new ProcessRun("fedgrid-kill-");
        string result = Path.Combine(run.Folder, "coordinator.json"), transcript = Path.Combine(run.Folder, "run.fgt");
        HostProcess coordinator = run.Start("coordinator", ["coordinator", .. Small.ToArguments(), "--port", run.Port.ToString(System.Globalization.CultureInfo.InvariantCulture),
            "--insecure-loopback", "--result", result, "--transcript", transcript, "--step-timeout", "2", "--round-timeout", "10", "--rejoin-timeout", "5"]);
        await coordinator.WaitForLine("listening on", TimeSpan.FromSeconds(60));
        HostProcess[] households = [.. Small.CreateScenario().Households.Select(h => run.Start(h.Id, ["household", .. Small.ToArguments(), "--id", h.Id, "--coordinator", run.Address, "--insecure-loopback"]))];
        await run.WaitForStep(coordinator, 30, TimeSpan.FromMinutes(2));
        households[2].Kill(); // SIGKILL on Linux
        Assert.Equal(0, await coordinator.WaitForExit(TimeSpan.FromMinutes(2)));
        CoordinatorOutcome outcome = Launcher.ReadOutcome(result);
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(96, outcome.Steps);
        Assert.Equal(4, outcome.Rounds);
        using var reader = FedGrid.Federation.Transcripts.TranscriptReader.Open(transcript);
        var events = reader.Records().Where(r => r.Event is not null).ToList();
        var drop = events.Single(r => r.Event.Kind == FedGrid.Federation.Wire.EventKind.StepDropout);
        Assert.Equal([2], drop.Event.Households);
        Assert.True(drop.Step >= 30, $"dropped at step {drop.Step}");
        Assert.Contains(events, r => r.Event.Kind == FedGrid.Federation.Wire.EventKind.RunCompleted);
    }

    [Fact]
    public async Task LaunchWithRealProcessesMatchesTheInProcessRun()
    {
        var (code, stdout, stderr) = await CliRun.RunAsync(TimeSpan.FromMinutes(3), "launch", "--households", "3", "--days", "1", "--seed", "7", "--steps-per-round", "24", "--json");
        Assert.True(code == 0, stderr);
        using JsonDocument d = JsonDocument.Parse(stdout);
        JsonElement r = d.RootElement;
        Assert.Equal(4, r.GetProperty("processes").GetInt32());
        Assert.Equal(4, r.GetProperty("rounds").GetInt32());
        Assert.True(r.GetProperty("matchesInProcess").GetBoolean());
        string sha = r.GetProperty("finalModelSha256").GetString()!;
        Assert.Equal(64, sha.Length);
        Assert.Equal(sha, r.GetProperty("inProcessModelSha256").GetString());
        Assert.Equal(Convert.ToHexStringLower(Small.RunInProcess().ModelSha256), sha);
        Assert.True(r.GetProperty("stepsPerSecond").GetDouble() > 0);
        Assert.True(r.GetProperty("bytesPerHouseholdPerStep").GetDouble() > 0);
        // The households' own log lines came through the launcher: they were separate processes.
        Assert.Contains("[H03]", stderr, StringComparison.Ordinal);
        Assert.Contains("finished after 96 steps", stderr, StringComparison.Ordinal);
    }
}
