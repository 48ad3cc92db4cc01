using Xunit.Abstractions;
using FedGrid.Federation.Coordination;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Hosting;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

/// <summary>
/// Households dropped at a step deadline over the hosts: a stalled household rejoins at the next round start with the
/// state it kept (as the in-process runner's offline households do), and the coordinator's checkpoint keeps who was
/// dropped (and the last reports the projection stands them in with) across a restart.
/// </summary>
public sealed class StepDropoutRejoinTests(ITestOutputHelper output)
{
    private static readonly HostedRunSettings Small = HostedRunTests.Small; // 3 households, 1 day, 4 rounds of 24 steps

    // Generous: an honest household on this shared 2-core machine must never miss it; only the stalled one does.
    private static readonly TimeSpan StepTimeout = TimeSpan.FromSeconds(10);

    /// <summary>The in-process run with household 1 offline from <paramref name="step"/> (before its partial sums), rejoining at the next round start or never.</summary>
    private static string InProcessWithDropout(bool rejoin, long step = 30) => Convert.ToHexStringLower(Small.RunInProcess(o => o with
    {
        ScriptedDropouts = [new ScriptedDropout(1, step)],
        RejoinAfterDropout = rejoin,
    }).ModelSha256);

    private static HouseholdHost Host(string id, string? state = null, long stall = -1, Task? release = null) =>
        new(Small, id, NullLogger.Instance) { StateFolder = state, StallBeforeStep = stall, StallRelease = release };

    [Theory]
    [InlineData(30)] // mid-round 1
    [InlineData(48)] // the first step of round 2 (seen in CI: a SIGSTOP that lands at a round start)
    public async Task AHouseholdStalledPastAStepDeadlineRejoinsAtTheNextRoundStartAndTheModelEqualsTheInProcessRunWithTheSameDropout(int stallStep)
    {
        int round = stallStep / 24;
        string dir = Directory.CreateTempSubdirectory("fedgrid-step-rejoin-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        try
        {
            await using var c = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(60), stepTimeout: StepTimeout, transcript: transcript);
            // H02 (index 1) stalls before the step (in the given round): it sends nothing until the coordinator drops it at the deadline.
            HouseholdHost[] hosts = [Host("H01"), Host("H02", stall: stallStep), Host("H03")];
            Task[] runs = [.. hosts.Select(h => Task.Run(() => h.RunAsync(c.Address, CancellationToken.None)))];
            CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(5));
            await Task.WhenAll(runs).WaitAsync(TimeSpan.FromMinutes(1));
            Assert.True(outcome.Ok, outcome.Error);
            Assert.Equal(96, outcome.Steps);
            Assert.Equal(4, outcome.AggregatedRounds); // above the quorum of 1 throughout
            Assert.Equal(1, hosts[1].DropoutRejoins);
            Assert.All(hosts, h => Assert.Equal(96, h.Steps));
            Assert.True(c.Logged($"rejoined at the start of round {round + 1} after a step dropout"));

            using TranscriptReader reader = TranscriptReader.Open(transcript);
            var records = reader.Records().ToList();
            Assert.True(reader.Completed);
            TranscriptRecord drop = Assert.Single(records, r => r.Event?.Kind == EventKind.StepDropout);
            Assert.Equal((round, (long)stallStep), (drop.Round, drop.Step));
            Assert.Equal([1], drop.Event.Households);
            TranscriptRecord rejoined = Assert.Single(records, r => r.Event?.Kind == EventKind.Rejoined);
            Assert.Equal(round + 1, rejoined.Round);
            Assert.Equal([1], rejoined.Event.Households);
            // Its rejoin request went in at the round start, before the round's first partial sums.
            int request = records.FindIndex(r => r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.Rejoin);
            int firstSums = records.FindIndex(r => r.Round == round + 1 && r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums);
            Assert.InRange(request, 0, firstSums);
            Assert.Equal(1, records[request].Received.HouseholdIndex);
            Assert.Equal(round, records[request].Received.Rejoin.LastRound);
            Assert.DoesNotContain(1, records.Single(r => r.Round == round && r.Event?.Kind == EventKind.RoundAggregated).Event.Households);
            Assert.Contains(1, records.Single(r => r.Round == round + 1 && r.Event?.Kind == EventKind.RoundAggregated).Event.Households);

            // The same scripted dropout in one process gives the same model bit for bit; the dropout changed the model.
            Assert.Equal(InProcessWithDropout(rejoin: true, stallStep), outcome.ModelSha256);
            Assert.NotEqual(Convert.ToHexStringLower(Small.RunInProcess().ModelSha256), outcome.ModelSha256);
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }

    [Fact]
    public async Task AHouseholdFrozenBeforeItsUploadMissesTheRoundThenTheNextStepAndRejoinsLikeTheInProcessRunWithAnUploadDropout()
    {
        // Seen in CI: a SIGSTOP that lands at a round end, before the upload. The round closes without it at the upload
        // deadline, the next round's first step drops it, and once continued it rejoins at the round start after that.
        string dir = Directory.CreateTempSubdirectory("fedgrid-upload-freeze-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        try
        {
            var release = new TaskCompletionSource();
            await using var c = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(3), stepTimeout: TimeSpan.FromSeconds(2), transcript: transcript);
            HouseholdHost[] hosts = [Host("H01"), new(Small, "H02", NullLogger.Instance) { HoldUploadInRound = 1, HoldUploadRelease = release.Task }, Host("H03")];
            Task[] runs = [.. hosts.Select(h => Task.Run(() => h.RunAsync(c.Address, CancellationToken.None)))];
            var watch = System.Diagnostics.Stopwatch.StartNew();
            while (!c.Logged("was dropped from round"))
            {
                Assert.True(watch.Elapsed < TimeSpan.FromMinutes(2) && !c.Run.IsCompleted, string.Join("\n", c.Lines));
                await Task.Delay(20);
            }
            release.SetResult();
            CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(3));
            await Task.WhenAll(runs).WaitAsync(TimeSpan.FromMinutes(1));
            Assert.True(outcome.Ok, outcome.Error);
            using TranscriptReader reader = TranscriptReader.Open(transcript);
            var records = reader.Records().ToList();
            TranscriptRecord drop = Assert.Single(records, r => r.Event?.Kind == EventKind.StepDropout);
            Assert.Equal((2, 48L), (drop.Round, drop.Step));
            Assert.DoesNotContain(1, records.Single(r => r.Round == 1 && r.Event?.Kind == EventKind.RoundAggregated).Event.Households);
            // In one process: the upload of round 1 lost (the household stays on), then a dropout before step 48's partial sums.
            string inProcess = Convert.ToHexStringLower(Small.RunInProcess(o => o with
            {
                ScriptedDropouts = [new ScriptedDropout(1, 47, DropoutPoint.BeforeUpload), new ScriptedDropout(1, 48)],
            }).ModelSha256);
            Assert.Equal(inProcess, outcome.ModelSha256);
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }

    [Fact]
    public async Task ACoordinatorResumedAfterAStepDropoutKeepsTheHouseholdDroppedAndEndsWithTheInProcessModel()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-step-resume-").FullName;
        string transcript = Path.Combine(dir, "run.fgt"), state = Path.Combine(dir, "coordinator"), households = Path.Combine(dir, "households");
        int port = Launcher.FreeLoopbackPort();
        var never = new TaskCompletionSource(); // H02 stays away for the rest of the run
        using var stop = new CancellationTokenSource();
        try
        {
            HouseholdHost[] hosts = [Host("H01", households), Host("H02", households, stall: 30, release: never.Task), Host("H03", households)];
            Task[] runs;
            await using (var first = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(60), stepTimeout: StepTimeout, transcript: transcript,
                adjust: o => o with { StateFolder = state, HoldAfterCheckpointRound = 2 }, port: port))
            {
                runs = [.. hosts.Select(h => Task.Run(() => h.RunAsync(first.Address, stop.Token)))];
                var watch = System.Diagnostics.Stopwatch.StartNew();
                while (!first.Logged("holding after the checkpoint of round 2"))
                {
                    Assert.True(watch.Elapsed < TimeSpan.FromMinutes(4), string.Join("\n", first.Lines));
                    Assert.False(first.Run.IsCompleted, string.Join("\n", first.Lines));
                    await Task.Delay(50);
                }
                Assert.True(first.Logged("round 2 starts without 1 households dropped before"));
            } // the coordinator goes away after its round-2 checkpoint, with H02 dropped

            await using var second = await TestCoordinator.StartAsync(Small, roundTimeout: TimeSpan.FromSeconds(60), stepTimeout: StepTimeout, transcript: transcript,
                adjust: o => o with { StateFolder = state, Resume = true }, port: port);
            CoordinatorOutcome outcome = await second.Run.WaitAsync(TimeSpan.FromMinutes(5));
            Assert.True(outcome.Ok, outcome.Error);
            Assert.Equal(96, outcome.Steps);
            Assert.Equal(4, outcome.AggregatedRounds);
            Assert.True(second.Logged("1 households dropped at a step deadline"), string.Join("\n", second.Lines));
            await Task.WhenAll(runs[0], runs[2]).WaitAsync(TimeSpan.FromMinutes(1));
            Assert.Equal(96, hosts[0].Steps);
            Assert.Equal(1, hosts[0].Rejoins); // restored its round-1 checkpoint after the restart
            Assert.False(runs[1].IsCompleted);

            using TranscriptReader reader = TranscriptReader.Open(transcript);
            var records = reader.Records().ToList();
            Assert.True(reader.Completed);
            Assert.Equal(Enumerable.Range(0, records.Count).Select(i => (ulong)i), records.Select(r => r.Sequence));
            // Dropped once, in round 1, and never waited for as a member again (a resumed coordinator that forgot the
            // dropout would drop it a second time at round 2's first step deadline).
            TranscriptRecord drop = Assert.Single(records, r => r.Event?.Kind == EventKind.StepDropout);
            Assert.Equal((1, 30L), (drop.Round, drop.Step));
            Assert.DoesNotContain(records, r => r.Event?.Kind == EventKind.Rejoined);
            Assert.All(records.Where(r => r.Round >= 2 && r.Event?.Kind == EventKind.RoundAggregated), r => Assert.Equal([0, 2], r.Event.Households));
            // The projection stood H02 in with its last report before and after the restart: the in-process run with the same dropout, bit for bit.
            Assert.Equal(InProcessWithDropout(rejoin: false), outcome.ModelSha256);
        }
        finally
        {
            await stop.CancelAsync();
            Directory.Delete(dir, recursive: true);
        }
    }

    [Fact]
    public async Task ARealHouseholdProcessStoppedPastAStepDeadlineAndContinuedRejoinsAndTheModelEqualsTheInProcessRunWithTheSameDropout()
    {
        // Real OS processes: household H02's process is frozen (SIGSTOP) mid-round 1 until the coordinator has dropped it
        // at the step deadline, then continued (SIGCONT): it reads the drop notice and rejoins with the state it kept.
        using var run = new ProcessRun("fedgrid-sigstop-");
        string result = Path.Combine(run.Folder, "result.json"), transcript = Path.Combine(run.Folder, "run.fgt");
        var coordinator = run.Start("coordinator", ["coordinator", .. Small.ToArguments(), "--port", run.Port.ToString(System.Globalization.CultureInfo.InvariantCulture),
            "--insecure-loopback", "--result", result, "--transcript", transcript, "--step-timeout", "10", "--round-timeout", "60"]);
        await coordinator.WaitForLine("listening on", TimeSpan.FromSeconds(60));
        List<HostProcess> households = [.. Small.CreateScenario().Households.Select(h => run.Start(h.Id,
            ["household", .. Small.ToArguments(), "--id", h.Id, "--coordinator", run.Address, "--insecure-loopback"]))];
        await run.WaitForStep(coordinator, 30, TimeSpan.FromMinutes(3));
        households[1].Signal("STOP");
        await coordinator.WaitForLine("was dropped from round", TimeSpan.FromMinutes(2));
        households[1].Signal("CONT");

        Assert.True(await coordinator.WaitForExit(TimeSpan.FromMinutes(4)) == 0, run.Output());
        foreach (HostProcess h in households)
        {
            Assert.True(await h.WaitForExit(TimeSpan.FromMinutes(1)) == 0, h.Output());
            Assert.True(h.Logged("finished after 96 steps"), h.Output());
        }
        Assert.True(households[1].Logged("after a step dropout"), households[1].Output());
        CoordinatorOutcome outcome = Launcher.ReadOutcome(result);
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(96, outcome.Steps);

        using TranscriptReader reader = TranscriptReader.Open(transcript);
        var records = reader.Records().ToList();
        TranscriptRecord drop = Assert.Single(records, r => r.Event?.Kind == EventKind.StepDropout);
        Assert.Equal([1], drop.Event.Households);
        TranscriptRecord rejoined = Assert.Single(records, r => r.Event?.Kind == EventKind.Rejoined);
        Assert.Equal([1], rejoined.Event.Households);
        Assert.Equal(drop.Round + 1, rejoined.Round); // at the next round start, as in one process
        // Where the freeze caught it (the transcript says which phase's deadline it missed) gives the in-process script.
        DropoutPoint point = drop.Event.Detail.Contains("projection inputs", StringComparison.Ordinal) ? DropoutPoint.BeforeProjectionInputs : DropoutPoint.BeforePartialSums;
        List<ScriptedDropout> script = [new ScriptedDropout(1, drop.Step, point)];
        // A freeze that landed at the previous round's end, before the upload (seen in CI): that round closed without
        // it at the upload deadline (the household stays a member), and the next step's deadline dropped it.
        bool uploadLost = drop.Round > 0 && !records.Single(r => r.Round == drop.Round - 1 && r.Event?.Kind == EventKind.RoundAggregated).Event.Households.Contains(1);
        if (uploadLost)
        {
            script.Insert(0, new ScriptedDropout(1, (long)drop.Round * Small.StepsPerRound - 1, DropoutPoint.BeforeUpload));
        }
        string inProcess = Convert.ToHexStringLower(Small.RunInProcess(o => o with { ScriptedDropouts = script }).ModelSha256);
        output.WriteLine($"SIGSTOP caught H02 at step {drop.Step} ({point}{(uploadLost ? ", its round-" + (drop.Round - 1) + " upload lost" : "")}); rejoined in round {rejoined.Round}; model {outcome.ModelSha256}");
        Assert.True(inProcess == outcome.ModelSha256, $"dropped at step {drop.Step} ({point}): hosted {outcome.ModelSha256}, in process {inProcess}");
        // Disposing the run kills every process left (SIGKILL ends a stopped process too).
    }

    [Fact]
    public async Task ARejoinSessionIsAuthenticatedLikeAJoin()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-rejoin-tls-").FullName;
        try
        {
            ScenarioCertificates.Create(dir, ["H01", "H02", "H03"]);
            await using var c = await TestCoordinator.StartAsync(Small, tls: dir);
            async Task<Grpc.Core.StatusCode> Rejoin(string certificateOf, int index)
            {
                using var handler = new SocketsHttpHandler();
                handler.SslOptions = new System.Net.Security.SslClientAuthenticationOptions
                {
                    ClientCertificates = [ScenarioCertificates.Load(ScenarioCertificates.HouseholdFile(dir, certificateOf))],
                    RemoteCertificateValidationCallback = ScenarioCertificates.ServerValidator(ScenarioCertificates.LoadCa(dir)),
                };
                using var channel = Grpc.Net.Client.GrpcChannel.ForAddress(c.Address, new Grpc.Net.Client.GrpcChannelOptions { HttpHandler = handler });
                using var call = new FedGrid.Hosting.Wire.FederationHost.FederationHostClient(channel).Session(deadline: DateTime.UtcNow.AddMinutes(2)); // a stuck session fails with DEADLINE_EXCEEDED
                await call.RequestStream.WriteAsync(new HouseholdMessage { HouseholdIndex = index, Rejoin = new RejoinRequest { LastRound = 0 } });
                var e = await Assert.ThrowsAsync<Grpc.Core.RpcException>(async () => await call.ResponseStream.MoveNext(CancellationToken.None).WaitAsync(TimeSpan.FromMinutes(1)));
                return e.StatusCode;
            }
            // H01's certificate asking to rejoin as household index 1 (H02): an impersonation.
            Assert.Equal(Grpc.Core.StatusCode.PermissionDenied, await Rejoin("H01", 1));
            Assert.True(c.Logged("the client certificate names household 'H01'; the rejoin request claims 'H02'"), string.Join("\n", c.Lines));
            Assert.Equal(Grpc.Core.StatusCode.NotFound, await Rejoin("H01", 7));
            Assert.False(c.Run.IsCompleted); // still admitting: the refusals left the run alone
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }

    [Fact]
    public void ASnapshotAfterAStepDropoutRestoresWhoWasDroppedAndAVersion1SnapshotIsRefusedNamingTheFile()
    {
        var scenario = Small.CreateScenario();
        FederatedRunOptions options = Small.CreateRunOptions() with { ScriptedDropouts = [new ScriptedDropout(1, 30)], RejoinAfterDropout = false };
        var runner = new InProcessFederation(scenario, options);
        for (int i = 0; i < 48; i++) runner.StepOnce(); // rounds 0 and 1; household 1 dropped at step 30
        Coordinator c = runner.Coordinator;
        Assert.True(c.AtRoundStart);
        Assert.True(c.IsDropped(1));
        byte[] snapshot = Snapshot(c);

        var fresh = new Coordinator(InProcessFederation.CreateCoordinatorSetup(scenario, options, Federation.Training.HouseholdControlTask.FeaturesPerHousehold), NullTranscript.Instance);
        fresh.RestoreSnapshot(new BinaryReader(new MemoryStream(snapshot)));
        Assert.True(fresh.IsDropped(1));
        Assert.False(fresh.IsDropped(0));
        Assert.Equal(1, fresh.StepDropouts);
        Assert.Equal(snapshot, Snapshot(fresh)); // the last reports the projection stands household 1 in with included

        // A snapshot of the earlier format (version 1, no dropouts recorded) is refused, naming the version and, through the engine, the file.
        byte[] old = (byte[])snapshot.Clone();
        BitConverter.GetBytes(1).CopyTo(old, 0);
        var e = Assert.Throws<InvalidDataException>(() => new Coordinator(InProcessFederation.CreateCoordinatorSetup(scenario, options,
            Federation.Training.HouseholdControlTask.FeaturesPerHousehold), NullTranscript.Instance).RestoreSnapshot(new BinaryReader(new MemoryStream(old))));
        Assert.Contains("version 1", e.Message, StringComparison.Ordinal);

        string dir = Directory.CreateTempSubdirectory("fedgrid-ckpt-v1-").FullName;
        try
        {
            string path = Path.Combine(dir, CoordinatorEngine.CheckpointFileName);
            CheckpointFile.Write(path, Small, "coordinator", w =>
            {
                w.Write(old.Length);
                w.Write(old);
                w.Write(-1L);
                w.Write(0UL);
                w.Write(0L);
                w.Write(0.0);
            });
            var engine = Assert.Throws<InvalidDataException>(() => new CoordinatorEngine(new CoordinatorHostOptions { Run = Small, StateFolder = dir, Resume = true }, NullLogger.Instance));
            Assert.Contains(path, engine.Message, StringComparison.Ordinal);
            Assert.Contains("version 1", engine.Message, StringComparison.Ordinal);
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }

    private static byte[] Snapshot(Coordinator c)
    {
        using var buffer = new MemoryStream();
        using (var w = new BinaryWriter(buffer))
        {
            c.WriteSnapshot(w);
        }
        return buffer.ToArray();
    }
}
