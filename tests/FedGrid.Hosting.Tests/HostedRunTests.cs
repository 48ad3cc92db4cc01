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
        await using var c = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(5), stepTimeout: TimeSpan.FromSeconds(1), transcript: transcript);
        using var leave = new CancellationTokenSource();
        var hosts = Small.CreateScenario().Households
            .Select(h => Task.Run(() => new HouseholdHost(Small, h.Id, NullLogger.Instance).RunAsync(c.Address, h.Id == "H03" ? leave.Token : CancellationToken.None))).ToArray();
        var status = new FedGrid.Hosting.Wire.FederationHost.FederationHostClient(c.Channel());
        while ((await status.StatusAsync(new FedGrid.Hosting.Wire.StatusRequest())).Step < 30)
        {
            await Task.Delay(20);
        }
        await leave.CancelAsync(); // household H03's connection drops mid-run
        CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(2));
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(96, outcome.Steps);
        Assert.Equal(4, outcome.Rounds);
        await Assert.ThrowsAnyAsync<Exception>(() => hosts[2]);
        await Task.WhenAll(hosts[..2]).WaitAsync(TimeSpan.FromMinutes(1));
        Assert.True(c.Logged("deadline passed"));
        using var reader = FedGrid.Federation.Transcripts.TranscriptReader.Open(transcript);
        var events = reader.Records().Where(r => r.Event is not null).Select(r => r.Event).ToList();
        Assert.Contains(events, e => e.Kind == FedGrid.Federation.Wire.EventKind.StepDropout && e.Households.SequenceEqual([2]));
        Assert.Contains(events, e => e.Kind == FedGrid.Federation.Wire.EventKind.RoundAggregated && !e.Households.Contains(2));
    }

    [Fact]
    public async Task LaunchWithRealProcessesMatchesTheInProcessRun()
    {
        string dll = typeof(FedGrid.Cli.Commands.LaunchCommand).Assembly.Location;
        var info = new ProcessStartInfo("dotnet") { RedirectStandardOutput = true, RedirectStandardError = true };
        foreach (string a in new[] { dll, "launch", "--households", "3", "--days", "1", "--seed", "7", "--steps-per-round", "24", "--json" })
        {
            info.ArgumentList.Add(a);
        }
        using Process p = Process.Start(info)!;
        Task<string> stderr = p.StandardError.ReadToEndAsync();
        string stdout = await p.StandardOutput.ReadToEndAsync();
        await p.WaitForExitAsync().WaitAsync(TimeSpan.FromMinutes(3));
        Assert.True(p.ExitCode == 0, await stderr);
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
        string log = await stderr;
        Assert.Contains("[H03]", log, StringComparison.Ordinal);
        Assert.Contains("finished after 96 steps", log, StringComparison.Ordinal);
    }
}
