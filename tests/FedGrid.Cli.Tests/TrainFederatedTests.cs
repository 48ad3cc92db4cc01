using System.Text.Json;
using FedGrid.Cli.Commands;
using FedGrid.Federation.Transcripts;

namespace FedGrid.Cli.Tests;

public class TrainFederatedTests
{
    private static (int Code, string Out, string Err, string Dir) Run(string? scheme, int days = 1, bool json = true)
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-trainfed-test-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = TrainCommand.Run(new TrainOptions("federated", "actor-critic", Days: days, OutDir: dir, Json: json,
            Federated: new FederatedTrainOptions(scheme)), stdout, stderr);
        return (code, stdout.ToString(), stderr.ToString(), dir);
    }

    [Fact]
    public void Json_summary_has_the_federated_fields_and_the_folder_the_transcript_and_ground_truth()
    {
        var (code, output, err, dir) = Run("private-columns");
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(output);
            var root = doc.RootElement;
            Assert.Equal("federated", root.GetProperty("mode").GetString());
            Assert.Equal("private-columns", root.GetProperty("scheme").GetString());
            Assert.Equal(1, root.GetProperty("rounds").GetInt32());
            long bytes = root.GetProperty("transcriptBytes").GetInt64();
            Assert.Equal(new FileInfo(Path.Combine(dir, "transcript.fgt")).Length, bytes);
            double perStep = root.GetProperty("bytesPerHouseholdPerStep").GetDouble();
            // Per step and household at least the two partial-sum vectors out and the two sums back (4 × 64 floats).
            Assert.InRange(perStep, 4 * 64 * 4, 20_000);
            Assert.Equal(96, root.GetProperty("decisionSteps").GetInt64());
            Assert.Equal(JsonValueKind.Number, root.GetProperty("finalDailyCost").ValueKind);
            Assert.True(File.Exists(Path.Combine(dir, "ground-truth.simulation-only.csv")));
            Assert.True(File.Exists(Path.Combine(dir, "daily.csv")));
            Assert.Equal("transcript.fgt", root.GetProperty("files").GetProperty("transcript").GetString());
            using var reader = TranscriptReader.Open(Path.Combine(dir, "transcript.fgt"));
            Assert.Equal("private-columns", reader.Header.Scheme);
            Assert.Equal(reader.Records().LongCount(), root.GetProperty("transcriptRecords").GetInt64());
            Assert.True(reader.Completed);
            Assert.Contains("train: federated private-columns (household projection inputs): day 1/1", err);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Unknown_scheme_and_scheme_without_federated_mode_are_user_errors()
    {
        var e = Assert.Throws<UserInputException>(() => Run("masked"));
        Assert.Contains("--scheme: unknown scheme 'masked'", e.Message);
        var e2 = Assert.Throws<UserInputException>(() => TrainCommand.Run(new TrainOptions("centralized", "actor-critic", Days: 1,
            Federated: new FederatedTrainOptions("plain")), new StringWriter(), new StringWriter()));
        Assert.Contains("need --mode federated", e2.Message);
        var e3 = Assert.Throws<UserInputException>(() => TrainCommand.Run(new TrainOptions("federated", "q-learning", Days: 1), new StringWriter(), new StringWriter()));
        Assert.Contains("actor-critic only", e3.Message);
    }
}
