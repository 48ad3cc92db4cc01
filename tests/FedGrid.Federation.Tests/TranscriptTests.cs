using System.Security.Cryptography;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Tests;

public sealed class TranscriptTests
{
    private static (string Path, InProcessFederation Run) WriteRun(string scheme, int steps, int stepsPerRound = 4)
    {
        string dir = TestRuns.TempDir("transcript");
        string path = Path.Combine(dir, "transcript.fgt");
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Scheme = FederationSchemes.FromName(scheme), Federation = TestRuns.Options(stepsPerRound: stepsPerRound), TranscriptPath = path,
            GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        });
        for (int i = 0; i < steps; i++) run.StepOnce();
        run.Finish();
        return (path, run);
    }

    [Fact]
    public void HeaderNamesTheRunAndRecordsReadBackInOrder()
    {
        var (path, run) = WriteRun("plain", 8);
        using var reader = TranscriptReader.Open(path);
        TranscriptHeader h = reader.Header;
        Assert.Equal("plain", h.Scheme);
        Assert.Equal(7UL, h.Seed);
        Assert.Equal(32, h.HouseholdCount);
        Assert.Equal(4, h.StepsPerRound);
        Assert.Equal("household", h.ProjectionInputs);
        Assert.Equal(RunHashes.Feeder(run.World.Scenario.Feeder), h.FeederSha256.ToByteArray());
        Assert.Equal(RunHashes.Scenario(run.World.Scenario), h.ScenarioSha256.ToByteArray());
        Assert.Equal(32, h.FeederSha256.Length);
        Assert.Equal([64, 64], h.ActorShape.HiddenSizes);
        Assert.Equal(64, h.ActorShape.OutputSize);
        Assert.Equal(32, h.CriticShape.OutputSize);
        var records = reader.Records().ToList();
        Assert.Null(reader.Torn);
        Assert.True(reader.Completed);
        Assert.Equal(run.Writer!.RecordCount, (ulong)records.Count);
        Assert.Equal(new FileInfo(path).Length, run.Writer.BytesWritten);
        for (int i = 0; i < records.Count; i++) Assert.Equal((ulong)i, records[i].Sequence);
        // Per-step records carry their step; 8 steps × 32 households of each per-step kind.
        var partial = records.Where(r => r.Kind() == RecordKind.PartialSums).ToList();
        Assert.Equal(8 * 32, partial.Count);
        Assert.Equal(Enumerable.Range(0, 8).SelectMany(s => Enumerable.Repeat((long)s, 32)), partial.Select(r => r.Step));
        Assert.Equal(partial.Select(r => r.Step / 4), partial.Select(r => (long)r.Round));
        // Kind filter.
        using var again = TranscriptReader.Open(path);
        Assert.Equal(2 * 32, again.Records(RecordKind.Upload).Count());
    }

    [Fact]
    public void GroundTruthIsASeparateSimulationOnlyFile()
    {
        var (path, _) = WriteRun("plain", 3);
        string truth = Path.Combine(Path.GetDirectoryName(path)!, GroundTruthWriter.FileName);
        string[] lines = File.ReadAllLines(truth);
        Assert.StartsWith("# SIMULATION ONLY", lines[0]);
        Assert.Equal(GroundTruthWriter.Header, lines[2]);
        Assert.Equal(3 + 3 * 32, lines.Length);
        // The transcript's projection inputs are what the households read; the ground truth agrees with them.
        using var reader = TranscriptReader.Open(path);
        var inputs = reader.Records(RecordKind.ProjectionInputs).Take(32).ToList();
        for (int m = 0; m < 32; m++)
        {
            string[] cells = lines[3 + m].Split(',');
            Assert.Equal(double.Parse(cells[5], System.Globalization.CultureInfo.InvariantCulture), inputs[m].Received.ProjectionInputs.BaseKw);
        }
    }

    [Fact]
    public void TornLastRecordIsReportedAtEveryCutAndEverythingBeforeStaysReadable()
    {
        var (path, _) = WriteRun("private-columns", 2, stepsPerRound: 2);
        byte[] bytes = File.ReadAllBytes(path);
        // Find where the last record starts: read it whole once.
        long lastStart;
        ulong total;
        using (var r = TranscriptReader.FromStream(new MemoryStream(bytes)))
        {
            var offsets = new List<long>();
            var stream = new MemoryStream(bytes);
            using var r2 = TranscriptReader.FromStream(stream);
            long previous = stream.Position;
            foreach (var _ in r2.Records())
            {
                offsets.Add(previous);
                previous = stream.Position;
            }
            lastStart = offsets[^1];
            total = r2.RecordCount;
            Assert.True(r2.Completed);
        }
        Assert.True(bytes.Length - lastStart > 2, "the last record is several bytes long");
        for (long cut = lastStart; cut < bytes.Length; cut++)
        {
            using var reader = TranscriptReader.FromStream(new MemoryStream(bytes, 0, (int)cut));
            int count = reader.Records().Count();
            Assert.Equal(total - 1, (ulong)count);
            Assert.False(reader.Completed);
            if (cut == lastStart)
            {
                Assert.Null(reader.Torn); // ends on a frame boundary: complete records, but no run-completed record
            }
            else
            {
                Assert.NotNull(reader.Torn);
                Assert.Equal(lastStart, reader.Torn!.Offset);
                Assert.Equal(total - 1, reader.Torn.RecordsBefore);
            }
        }
    }

    [Fact]
    public void NotATranscriptIsRefusedByName()
    {
        string path = Path.Combine(TestRuns.TempDir("bad"), "x.fgt");
        File.WriteAllText(path, "hello, world");
        var e = Assert.Throws<TranscriptFormatException>(() => TranscriptReader.Open(path));
        Assert.Contains("x.fgt", e.Message);
    }

    [Fact]
    public void PrivateColumnsNeverSendsAHouseholdsFirstLayerColumns()
    {
        // Under plain the columns do cross (control); under private-columns no message carries them, and their bytes
        // appear nowhere in the transcript.
        foreach (string scheme in new[] { "plain", "private-columns" })
        {
            var (path, run) = WriteRun(scheme, 8);
            byte[] file = File.ReadAllBytes(path);
            int found = 0;
            for (int m = 0; m < 32; m++)
            {
                var agent = run.Households[m];
                var (co, cn) = agent.Actor.FirstLayerBlockRange(m);
                // The household's current columns (after two rounds of local training) as little-endian floats.
                byte[] pattern = new byte[4 * 8];
                for (int j = 0; j < 8; j++) BitConverter.TryWriteBytes(pattern.AsSpan(4 * j), agent.Actor.Parameters[co + j]);
                if (file.AsSpan().IndexOf(pattern) >= 0) found++;
            }
            using var reader = TranscriptReader.Open(path);
            var shared = run.Households[0].Actor.SharedRange().Length;
            var records = reader.Records(RecordKind.Upload, RecordKind.Model).ToList();
            if (scheme == "plain")
            {
                Assert.Equal(32, found);
                Assert.Contains(records, r => r.Kind() == RecordKind.Upload && r.Received.Upload.Scope == ParameterScope.OwnColumnsAndShared);
            }
            else
            {
                Assert.Equal(0, found);
                Assert.All(records, r =>
                {
                    ParameterScope scope = r.Kind() == RecordKind.Upload ? r.Received.Upload.Scope : r.Sent.Model.Scope;
                    int length = r.Kind() == RecordKind.Upload ? r.Received.Upload.ActorParameters.Count : r.Sent.Model.ActorParameters.Count;
                    Assert.Equal(ParameterScope.Shared, scope);
                    Assert.Equal(shared, length);
                });
                // And the coordinator's own copy holds no columns.
                for (int m = 0; m < 32; m++)
                {
                    var (co, cn) = run.Coordinator.Actor.FirstLayerBlockRange(m);
                    Assert.All(run.Coordinator.Actor.Parameters.Slice(co, cn).ToArray(), v => Assert.Equal(0f, v));
                }
            }
        }
    }
}
