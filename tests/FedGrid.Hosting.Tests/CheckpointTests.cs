using FedGrid.Federation.Coordination;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Hosting;

namespace FedGrid.Hosting.Tests;

/// <summary>The checkpoint file format and the transcript's continuation from a checkpoint.</summary>
public sealed class CheckpointTests
{
    private static readonly HostedRunSettings Run = HostedRunTests.Small;

    [Fact]
    public void ACheckpointReadsBackAndADamagedOrForeignOneIsRefusedNamingTheFile()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-ckpt-").FullName;
        string path = Path.Combine(dir, "c.ckpt");
        CheckpointFile.Write(path, Run, "coordinator", w => { w.Write(42); w.Write("round"); });
        Assert.False(File.Exists(path + ".tmp")); // renamed into place
        Assert.Equal((42, "round"), CheckpointFile.Read(path, Run, "coordinator", r => (r.ReadInt32(), r.ReadString())));

        var foreign = Assert.Throws<InvalidDataException>(() => CheckpointFile.Read(path, Run with { Seed = 8 }, "coordinator", r => r.ReadInt32()));
        Assert.Contains(path, foreign.Message, StringComparison.Ordinal);
        Assert.Contains("checkpoint of run", foreign.Message, StringComparison.Ordinal);
        var kind = Assert.Throws<InvalidDataException>(() => CheckpointFile.Read(path, Run, "H01", r => r.ReadInt32()));
        Assert.Contains("'coordinator'", kind.Message, StringComparison.Ordinal);

        byte[] bytes = File.ReadAllBytes(path);
        bytes[bytes.Length / 2] ^= 0x10;
        File.WriteAllBytes(path, bytes);
        var damaged = Assert.Throws<InvalidDataException>(() => CheckpointFile.Read(path, Run, "coordinator", r => r.ReadInt32()));
        Assert.Contains("damaged", damaged.Message, StringComparison.Ordinal);
        File.WriteAllBytes(path, bytes[..20]); // torn
        Assert.Throws<InvalidDataException>(() => CheckpointFile.Read(path, Run, "coordinator", r => r.ReadInt32()));
        Directory.Delete(dir, recursive: true);
    }

    [Fact]
    public void ATranscriptContinuedFromACheckpointDropsWhatCameAfterItTornTailIncludedAndStaysGapFree()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-ckpt-").FullName;
        string path = Path.Combine(dir, "t.fgt");
        var header = new TranscriptHeader { FormatVersion = TranscriptFormat.Version, Scheme = "plain", HouseholdCount = 3, StepsPerRound = 24 };
        long bytes;
        ulong records;
        using (var w = TranscriptWriter.Create(path, header))
        {
            for (int i = 0; i < 5; i++) w.Event(0, -1, new CoordinatorEvent { Kind = EventKind.RoundSelected, Detail = $"before {i}" });
            w.FlushToDisk();
            (bytes, records) = (w.BytesWritten, w.RecordCount);
            for (int i = 0; i < 3; i++) w.Event(1, -1, new CoordinatorEvent { Kind = EventKind.Dropout, Detail = $"after {i}" });
        }
        using (var f = new FileStream(path, FileMode.Append))
        {
            f.Write([0x7F, 0x01, 0x02]); // a frame torn by the kill
        }
        using (TranscriptReader torn = TranscriptReader.Open(path))
        {
            _ = torn.Records().ToList();
            Assert.NotNull(torn.Torn);
        }
        using (var w = TranscriptWriter.Append(path, bytes, records))
        {
            w.Event(1, -1, new CoordinatorEvent { Kind = EventKind.RoundAggregated, Detail = "resumed" });
        }
        using TranscriptReader reader = TranscriptReader.Open(path);
        var all = reader.Records().ToList();
        Assert.Null(reader.Torn);
        Assert.Equal(6, all.Count);
        Assert.Equal(Enumerable.Range(0, 6).Select(i => (ulong)i), all.Select(r => r.Sequence));
        Assert.DoesNotContain(all, r => r.Event.Kind == EventKind.Dropout);
        Assert.Equal("resumed", all[^1].Event.Detail);
        Assert.Throws<InvalidDataException>(() => TranscriptWriter.Append(path, new FileInfo(path).Length + 1, 6).Dispose());
        Directory.Delete(dir, recursive: true);
    }

    [Fact]
    public void TheCoordinatorIsCheckpointedAtARoundStartOnlyAndARestoredMachineWritesTheSameSnapshot()
    {
        var scenario = Run.CreateScenario();
        FederatedRunOptions options = Run.CreateRunOptions();
        var runner = new InProcessFederation(scenario, options);
        Coordinator c = runner.Coordinator;
        for (int i = 0; i < 24; i++) runner.StepOnce(); // round 0's steps, its training and aggregate
        Assert.True(c.AtRoundStart);
        Assert.Equal(1, c.Round);
        byte[] snapshot = Snapshot(c);
        float[] actor = c.Actor.Parameters.ToArray();

        // A fresh machine takes it; written again, the snapshot is byte for byte the same (model, counters, registrations, solver warm start).
        var fresh = new Coordinator(InProcessFederation.CreateCoordinatorSetup(scenario, options, Federation.Training.HouseholdControlTask.FeaturesPerHousehold), NullTranscript.Instance);
        fresh.RestoreSnapshot(new BinaryReader(new MemoryStream(snapshot)));
        Assert.Equal(CoordinatorPhase.CollectingPartialSums, fresh.Phase);
        Assert.Equal(1, fresh.Round);
        Assert.Equal(23, fresh.Step);
        Assert.Equal(1, fresh.AggregatedRounds);
        Assert.Equal(actor, fresh.Actor.Parameters.ToArray());
        Assert.Equal(snapshot, Snapshot(fresh));

        // Not mid-round, and not into a machine that already runs.
        runner.StepOnce();
        Assert.False(c.AtRoundStart);
        Assert.Throws<InvalidOperationException>(() => Snapshot(c));
        Assert.Throws<InvalidOperationException>(() => c.RestoreSnapshot(new BinaryReader(new MemoryStream(snapshot))));
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
