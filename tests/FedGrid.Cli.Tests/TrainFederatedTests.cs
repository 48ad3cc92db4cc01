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
            Assert.Equal(JsonValueKind.Null, root.GetProperty("epsilon").ValueKind); // no DP under private-columns
            Assert.Equal(JsonValueKind.Null, root.GetProperty("delta").ValueKind);
            Assert.Equal("mean", root.GetProperty("aggregation").GetString());
            Assert.Equal(1, root.GetProperty("warmStartDays").GetInt32()); // the centralized default
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
    public void On_the_warm_start_day_the_federated_run_costs_what_the_centralized_one_does()
    {
        // Both warm-start from the same price rule on day 1 (default --warm-start-days 1; the federated warm start's rule is
        // the peak rule, which the centralized run is given), so the day's setpoints, the projection and hence the costs are
        // the same; the federated households only clone the rule at the day's end.
        static double Cost(string mode)
        {
            string dir = Path.Combine(Path.GetTempPath(), "fedgrid-trainfed-warm-" + Guid.NewGuid().ToString("N"));
            var stdout = new StringWriter();
            try
            {
                Assert.Equal(0, TrainCommand.Run(new TrainOptions(mode, "actor-critic", Days: 1, OutDir: dir, Json: true, WarmStartRule: mode == "centralized" ? FedGrid.Federation.Training.WarmStartRuleNames.Of(FedGrid.Federation.Training.WarmStartRule.Peak) : null), stdout, new StringWriter()));
                using var doc = JsonDocument.Parse(stdout.ToString());
                return doc.RootElement.GetProperty("finalDailyCost").GetDouble();
            }
            finally { Directory.Delete(dir, true); }
        }
        Assert.Equal(Cost("centralized"), Cost("federated"), 6);
    }

    [Fact]
    public void Warm_start_days_must_fill_whole_rounds()
    {
        var e = Assert.Throws<UserInputException>(() => TrainCommand.Run(new TrainOptions("federated", "actor-critic", Days: 1,
            Federated: new FederatedTrainOptions("plain", StepsPerRound: 5)), new StringWriter(), new StringWriter()));
        Assert.Contains("--warm-start-days 1 (96 steps) is not a whole number of rounds of --steps-per-round 5", e.Message);
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

    private static void Bad(FederatedTrainOptions f, string expected, string mode = "federated")
    {
        var e = Assert.Throws<UserInputException>(() => TrainCommand.Run(new TrainOptions(mode, "actor-critic", Days: 1, Federated: f),
            new StringWriter(), new StringWriter()));
        Assert.Contains(expected, e.Message);
    }

    [Fact]
    public void Privacy_and_aggregation_options_are_checked_with_clear_errors()
    {
        Bad(new FederatedTrainOptions("plain", NoiseMultiplier: 1), "--noise-multiplier, --clip-norm, --upload-clip-norm and --delta need --scheme dp or dp-masked-sums; 'plain' adds no noise");
        Bad(new FederatedTrainOptions("masked-sums", ClipNorm: 1), "need --scheme dp or dp-masked-sums; 'masked-sums'");
        Bad(new FederatedTrainOptions("dp", NoiseMultiplier: 0), "--noise-multiplier must be positive and finite, got 0");
        Bad(new FederatedTrainOptions("dp", NoiseMultiplier: double.NaN), "--noise-multiplier must be positive and finite");
        Bad(new FederatedTrainOptions("dp", ClipNorm: -1), "--clip-norm must be positive and finite, got -1");
        Bad(new FederatedTrainOptions("dp-masked-sums", UploadClipNorm: 0), "--upload-clip-norm must be positive and finite, got 0");
        Bad(new FederatedTrainOptions(Aggregation: "fedavg"), "--aggregation: unknown rule 'fedavg'; use mean, median, trimmed-mean");
        Bad(new FederatedTrainOptions(Aggregation: "median", TrimFraction: 0.1), "--trim-fraction needs --aggregation trimmed-mean");
        Bad(new FederatedTrainOptions(Aggregation: "trimmed-mean", TrimFraction: 0.5), "--trim-fraction must lie in [0, 0.5), got 0.5");
        Bad(new FederatedTrainOptions(NoiseMultiplier: 1), "need --mode federated", mode: "centralized");
        Bad(new FederatedTrainOptions(Aggregation: "median"), "need --mode federated", mode: "centralized");
    }

    [Fact]
    public void Mask_uploads_and_delta_are_checked_with_clear_errors()
    {
        Bad(new FederatedTrainOptions("plain", MaskUploads: true), "--mask-uploads needs the pairwise masks of scheme masked-sums or dp-masked-sums; scheme 'plain' has none");
        Bad(new FederatedTrainOptions("private-columns", MaskUploads: true), "scheme 'private-columns' has none");
        Bad(new FederatedTrainOptions("dp", MaskUploads: true), "scheme 'dp' has none");
        Bad(new FederatedTrainOptions("masked-sums", Aggregation: "median", MaskUploads: true), "--mask-uploads cannot be combined with --aggregation median");
        Bad(new FederatedTrainOptions("dp-masked-sums", Aggregation: "trimmed-mean", MaskUploads: true), "--mask-uploads cannot be combined with --aggregation trimmed-mean");
        Bad(new FederatedTrainOptions(MaskUploads: true), "need --mode federated", mode: "centralized");
        Bad(new FederatedTrainOptions("dp", Delta: 0), "--delta must lie strictly between 0 and 1, got 0");
        Bad(new FederatedTrainOptions("dp", Delta: 1), "--delta must lie strictly between 0 and 1, got 1");
        Bad(new FederatedTrainOptions("dp-masked-sums", Delta: double.NaN), "--delta must lie strictly between 0 and 1, got NaN");
        Bad(new FederatedTrainOptions("masked-sums", Delta: 1e-3), "--delta need --scheme dp or dp-masked-sums; 'masked-sums' adds no noise");
        Bad(new FederatedTrainOptions(Delta: 1e-3), "need --mode federated", mode: "centralized");
    }

    [Fact]
    public void Dp_over_masked_sums_with_masked_uploads_and_a_given_delta_reports_that_delta()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-trainfed-mu-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        int code = TrainCommand.Run(new TrainOptions("federated", "actor-critic", Days: 1, OutDir: dir, Json: true,
            Federated: new FederatedTrainOptions("dp-masked-sums", NoiseMultiplier: 4, MaskUploads: true, Delta: 1e-3)), stdout, new StringWriter());
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(stdout.ToString());
            JsonElement root = doc.RootElement;
            Assert.True(root.GetProperty("maskUploads").GetBoolean());
            Assert.Equal(1e-3, root.GetProperty("delta").GetDouble());
            // As in the test above (2·(96 + 1) releases at z = 4, ρ = 194/32), with ln(1/δ) = ln(1000): the continuous
            // minimum ρ + 2√(ρ ln(1/δ)) (Bun & Steinke 2016, Prop. 1.3); the accountant's grid of orders is at or a little above it.
            double rho = 194 / 32.0, best = rho + (2 * Math.Sqrt(rho * Math.Log(1e3)));
            Assert.InRange(root.GetProperty("epsilon").GetDouble(), best * 0.9999, best * 1.02);
            using var reader = TranscriptReader.Open(Path.Combine(dir, "transcript.fgt"));
            var uploads = reader.Records(RecordKind.Upload).Select(r => r.Received!.Upload).ToList();
            Assert.Equal(32, uploads.Count);
            Assert.All(uploads, u => { Assert.Empty(u.ActorParameters); Assert.NotEmpty(u.MaskedParameters); Assert.Equal(0, u.SampleCount); });
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Dp_over_masked_sums_masks_the_noisy_partial_sums_and_reports_the_bound_of_dp()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-trainfed-dpm-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        int code = TrainCommand.Run(new TrainOptions("federated", "actor-critic", Days: 1, OutDir: dir, Json: true,
            Federated: new FederatedTrainOptions("dp-masked-sums", NoiseMultiplier: 4, Aggregation: "trimmed-mean")), stdout, new StringWriter());
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(stdout.ToString());
            JsonElement root = doc.RootElement;
            Assert.Equal("dp-masked-sums", root.GetProperty("scheme").GetString());
            Assert.Equal(0.1, root.GetProperty("trimFraction").GetDouble());
            // 96 steps and one round: 2·(96 + 1) Gaussian releases at z = 4. Their RDP is ρα with ρ = 194/(2·16); the
            // continuous minimum of ρα + ln(1/δ)/(α − 1) over α is ρ + 2√(ρ ln(1/δ)) (calculus; the zCDP conversion of
            // Bun & Steinke 2016, Prop. 1.3). The accountant minimises over a grid of orders: at or a little above it.
            double rho = 194 / 32.0, best = rho + (2 * Math.Sqrt(rho * Math.Log(1e5)));
            double eps = root.GetProperty("epsilon").GetDouble();
            Assert.InRange(eps, best * 0.9999, best * 1.02);
            Assert.Equal(1e-5, root.GetProperty("delta").GetDouble());
            using var reader = TranscriptReader.Open(Path.Combine(dir, "transcript.fgt"));
            Assert.Equal("dp-masked-sums", reader.Header.Scheme);
            var sums = reader.Records(RecordKind.PartialSums).Take(64).Select(r => r.Received!.PartialSums).ToList();
            Assert.All(sums, p => Assert.Empty(p.Actor)); // the coordinator holds masked ring words only
            Assert.All(sums, p => Assert.NotEmpty(p.MaskedActor));
        }
        finally { Directory.Delete(dir, true); }
    }
}
