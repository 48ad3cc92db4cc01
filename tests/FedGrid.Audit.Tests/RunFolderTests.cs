using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Audit.Scoring;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;
using Xunit.Abstractions;

namespace FedGrid.Audit.Tests;

/// <summary>End to end: a real federated run's transcript, read back and attacked.</summary>
public sealed class RunFolderTests(ITestOutputHelper output)
{
    private readonly ITestOutputHelper _output = output;

    internal static string Train(string scheme, int days, int stepsPerRound = 96, LocalOptimiser optimiser = LocalOptimiser.Adam, double? learningRate = null,
        IProjectionInputsForm? projectionForm = null, bool maskUploads = false)
    {
        string dir = Directory.CreateTempSubdirectory($"fedgrid-audit-{scheme}-").FullName;
        Scenario scenario = DefaultScenario.Create(DefaultScenario.DefaultSeed, days);
        var fed = new FederationOptions
        {
            Learning = learningRate is { } lr ? TrainingDefaults.ActorCritic with { ActorLearningRate = lr, CriticLearningRate = lr } : TrainingDefaults.ActorCritic,
            StepsPerRound = stepsPerRound,
            LocalTraining = new LocalTrainingOptions { Optimiser = optimiser },
        };
        var run = new InProcessFederation(scenario, new FederatedRunOptions
        {
            Scheme = FederationSchemes.FromName(scheme, maskUploads: maskUploads),
            Federation = fed, ProjectionForm = projectionForm,
            TranscriptPath = Path.Combine(dir, RunFolderReader.TranscriptName), GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        });
        run.Run();
        return dir;
    }

    private static ChannelSummary Summary(ScoreCard card, Channel c, string attack, Quantity q) =>
        card.Summaries.Single(s => s.Channel == c && s.Attack == attack && s.Quantity == q);

    [Fact]
    public void Plain_run_partial_sums_recover_every_households_base_load()
    {
        string dir = Train(ClearScheme.PlainName, 1);
        AuditRun run = RunFolderReader.Load(dir);
        Assert.Equal(32, run.View.Households.Count);
        Assert.NotNull(run.Truth);
        AttackResults results = Auditor.Attack(run.View);
        ScoreCard card = Scorer.Score(run.View, results, run.Truth!);
        ChannelSummary ps = Summary(card, Channel.PartialSums, PartialSumInversion.Name, Quantity.BaseLoad);
        Assert.True(ps.RelativeRmse <= 1e-6, $"pooled {ps.RelativeRmse}");
        Assert.True(card.Households.Where(h => h.Channel == Channel.PartialSums && h.Quantity == Quantity.BaseLoad).All(h => h.Attacked.RelativeRmse <= 1e-6));
        Assert.True(Summary(card, Channel.ProjectionInputs, ProjectionInputAttack.ReportedName, Quantity.BaseLoad).RelativeRmse < 1e-12);
        Assert.True(ps.PriorRelativeRmse > 0.2);
        Assert.Contains(results.Identifiability, i => i.Channel == Channel.PartialSums && i.Rank == FedGrid.Federation.Training.HouseholdControlTask.FeaturesPerHousehold);
    }

    /// <summary>The same view with the uploads' rounding intervals dropped: the attack then has only the least-squares estimate.</summary>
    private static AttackerView WithoutRounding(AttackerView view) => view with
    {
        Households = [.. view.Households.Select(h => h with
        {
            Rounds = [.. h.Rounds.Select(r => r with { Updates = [.. r.Updates.Select(u => new FirstLayerUpdate(u.Neurons, u.WeightDelta, u.BiasDelta))] })],
        })],
    };

    private static double UploadErrorOnTrainedSlots(AuditRun run, AttackerView view)
    {
        AttackResults results = Auditor.Attack(view);
        // Every slot but the last is some round's single training sample (the last is only a bootstrap row, never trained on).
        int T = view.SlotCount;
        double sse = 0, sst = 0;
        foreach (Reconstruction r in results.Reconstructions.Where(r => r.Channel == Channel.Uploads && r.Quantity == Quantity.BaseLoad))
        {
            ErrorMetrics e = ErrorMetrics.Compute(run.Truth!.Kw(Quantity.BaseLoad, r.Household).AsSpan(0, T - 1), r.EstimateKw.AsSpan(0, T - 1));
            sse += e.SumSquaredError;
            sst += e.SumSquaredTruth;
        }
        Assert.Equal(32, results.Reconstructions.Count(r => r.Channel == Channel.Uploads && r.Quantity == Quantity.BaseLoad));
        return Math.Sqrt(sse / sst);
    }

    /// <summary>Relative RMSE of the upload attack on the trained slots of a 1-day, 1-step-per-round SGD run: set-membership and least squares.</summary>
    private (double Interval, double LeastSquares) UploadErrorOnTrainedSlots(double? learningRate)
    {
        string dir = Train(ClearScheme.PlainName, 1, stepsPerRound: 1, optimiser: LocalOptimiser.Sgd, learningRate: learningRate);
        AuditRun run = RunFolderReader.Load(dir);
        Assert.All(run.View.Households, h => Assert.All(h.Rounds.SelectMany(r => r.Updates), u => Assert.NotNull(u.WeightRounding)));
        (double iv, double ls) = (UploadErrorOnTrainedSlots(run, run.View), UploadErrorOnTrainedSlots(run, WithoutRounding(run.View)));
        _output.WriteLine($"learning rate {learningRate?.ToString() ?? "default"}: set-membership {iv:E3}, least squares {ls:E3}");
        return (iv, ls);
    }

    [Fact]
    public void One_local_sample_sgd_upload_recovers_the_trained_state()
    {
        // Learning rate 3e-2: steps large enough that float32 upload − broadcast keeps four digits. Measured: least squares
        // 2.5e-4, set-membership 1.4e-5.
        (double iv, double ls) = UploadErrorOnTrainedSlots(3e-2);
        Assert.True(ls <= 1e-3, $"least squares, pooled over trained slots {ls}");
        Assert.True(iv <= 5e-5, $"set-membership, pooled over trained slots {iv}");
    }

    [Fact]
    public void One_local_sample_upload_at_the_default_learning_rate_meets_one_in_a_thousand_from_the_rounding_intervals()
    {
        // Default rates (actor 3e-4, critic 1e-3) with clipping move weights of order 0.1 by about 1e-6: upload − broadcast keeps
        // two or three digits. Measured: least squares 3.5e-3 (float32 quantisation, falling like 1/√rows), set-membership
        // 1.2e-4 (the intersection of the rows' rounding boxes, falling like 1/rows); issue 6's goal is 1e-3.
        (double iv, double ls) = UploadErrorOnTrainedSlots(null);
        Assert.True(ls is > 1e-3 and < 0.1, $"least squares, pooled over trained slots {ls}");
        Assert.True(iv <= 3e-4, $"set-membership, pooled over trained slots {iv}");
    }

    [Fact]
    public void Private_columns_run_never_sees_w_m_and_is_reported_with_and_without_the_meter()
    {
        string dir = Train(ClearScheme.PrivateColumnsName, 1);
        AuditRun without = RunFolderReader.Load(dir, substationMeter: false);
        Assert.All(without.View.Households, h => Assert.All(h.Rounds, r => Assert.Null(r.BroadcastWeights)));
        AttackResults r0 = Auditor.Attack(without.View);
        ScoreCard c0 = Scorer.Score(without.View, r0, without.Truth!);
        Assert.True(Summary(c0, Channel.PartialSums, SubspaceAttack.PriorProjectionName, Quantity.BaseLoad).ExposureRatio < 1.05);
        Assert.DoesNotContain(c0.Summaries, s => s.Attack == SubspaceAttack.MeterCalibrationName);
        AuditRun with = RunFolderReader.Load(dir, substationMeter: true);
        ScoreCard c1 = Scorer.Score(with.View, Auditor.Attack(with.View), with.Truth!);
        Assert.Contains(c1.Summaries, s => s.Attack == SubspaceAttack.MeterCalibrationName);
    }

    [Fact]
    public void Masked_sums_run_leaves_the_partial_sums_attack_no_better_than_the_prior()
    {
        // Issue 7 goal: under masked-sums the partial-sum attack's exposureRatio is at least 0.95.
        string dir = Train(FedGrid.Federation.Privacy.MaskedSumsScheme.SchemeName, 1);
        AuditRun run = RunFolderReader.Load(dir);
        Assert.All(run.View.Households, h => Assert.All(h.PartialSums!, v => Assert.True(float.IsNaN(v))));
        ScoreCard card = Scorer.Score(run.View, Auditor.Attack(run.View), run.Truth!);
        ChannelSummary[] ps = [.. card.Summaries.Where(s => s.Channel == Channel.PartialSums)];
        Assert.NotEmpty(ps);
        Assert.All(ps, s => Assert.True(s.ExposureRatio >= 0.95, $"{s.Attack} {s.Quantity}: {s.ExposureRatio}"));
    }

    [Fact]
    public void Masked_uploads_leave_the_uploads_channel_not_observable()
    {
        // The upload attack's best case (one local SGD sample per round, the setting in which it recovers the trained state
        // exactly under plain uploads): with the uploads masked the coordinator holds only each round's sum, so the channel
        // yields nothing — exposureRatio at least 0.95 (the prior), as for masked partial sums, and reported as not observable.
        string scheme = FedGrid.Federation.Privacy.MaskedSumsScheme.SchemeName;
        double Exposure(bool mask, out AttackResults results, out AuditRun run)
        {
            string dir = Train(scheme, 1, stepsPerRound: 1, optimiser: LocalOptimiser.Sgd, learningRate: 3e-2, maskUploads: mask);
            run = RunFolderReader.Load(dir);
            results = Auditor.Attack(run.View);
            ScoreCard card = Scorer.Score(run.View, results, run.Truth!);
            return card.Summaries.Where(s => s.Channel == Channel.Uploads).Min(s => s.ExposureRatio);
        }
        double clear = Exposure(false, out _, out _);
        Assert.True(clear < 0.5, $"without masked uploads the attack should work: exposure {clear}");
        double masked = Exposure(true, out AttackResults r, out AuditRun view);
        Assert.All(view.View.Households, h => Assert.All(h.Rounds.Take(95), o => { Assert.True(o.MaskedUpload); Assert.Empty(o.Updates); }));
        Assert.True(masked >= 0.95, $"uploads exposure {masked}");
        Assert.Contains(r.Notes, n => n.Contains("uploads: not observable for 32 household(s) with masked uploads", StringComparison.Ordinal));
        Assert.All(r.Identifiability.Where(i => i.Channel == Channel.Uploads), i => Assert.StartsWith("not observable", i.Note, StringComparison.Ordinal));
    }

    [Fact]
    public void A_transcript_with_step_dropouts_and_rejoins_is_audited_with_the_missed_steps_unobserved()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-audit-dropout-").FullName;
        var run = new InProcessFederation(DefaultScenario.Create(DefaultScenario.DefaultSeed, 1), new FederatedRunOptions
        {
            Scheme = ClearScheme.Plain(),
            Federation = new FederationOptions { Learning = TrainingDefaults.ActorCritic, StepsPerRound = 48 },
            ScriptedDropouts = [new ScriptedDropout(3, 10), new ScriptedDropout(5, 30, DropoutPoint.BeforeProjectionInputs)],
            TranscriptPath = Path.Combine(dir, RunFolderReader.TranscriptName), GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        });
        run.Run();
        AuditRun audit = RunFolderReader.Load(dir);
        Assert.Equal(96, audit.View.SlotCount);
        int hN = audit.View.Households[3].PartialSums!.Length / 96;
        // Household 3 sent nothing from step 10 to the round's end (step 47), and again from round 1 on.
        Assert.All(Enumerable.Range(10, 38), t => Assert.True(float.IsNaN(audit.View.Households[3].PartialSums![t * hN])));
        Assert.True(float.IsFinite(audit.View.Households[3].PartialSums![9 * hN]));
        Assert.True(float.IsFinite(audit.View.Households[3].PartialSums![48 * hN]));
        ScoreCard card = Scorer.Score(audit.View, Auditor.Attack(audit.View), audit.Truth!);
        // The others' partial sums still give their base load away exactly; the dropped households' only on the steps they
        // sent (the rest falls back to the prior).
        HouseholdScore[] scores = [.. card.Households.Where(h => h.Channel == Channel.PartialSums && h.Attack == PartialSumInversion.Name && h.Quantity == Quantity.BaseLoad)];
        Assert.Equal(32, scores.Length);
        Assert.All(scores.Where(h => h.Household is not (3 or 5)), h => Assert.True(h.Attacked.RelativeRmse <= 1e-6, $"household {h.Household}: {h.Attacked.RelativeRmse}"));
        Assert.All(scores.Where(h => h.Household is 3 or 5), h => Assert.True(h.Attacked.RelativeRmse > 1e-3 && h.Attacked.RelativeRmse < h.Prior.RelativeRmse,
            $"household {h.Household}: {h.Attacked.RelativeRmse} against the prior's {h.Prior.RelativeRmse}"));
    }

    [Fact]
    public void A_missing_folder_or_transcript_is_named()
    {
        var e = Assert.Throws<RunFolderException>(() => RunFolderReader.Load("/nonexistent/run"));
        Assert.Contains("/nonexistent/run", e.Message);
        string empty = Directory.CreateTempSubdirectory("fedgrid-empty-").FullName;
        Assert.Contains("transcript.fgt", Assert.Throws<RunFolderException>(() => RunFolderReader.Load(empty)).Message);
    }
    [Fact]
    public void A_torn_transcript_is_audited_up_to_the_tear_and_a_bad_ground_truth_header_is_named()
    {
        string dir = Train(ClearScheme.PlainName, 1);
        string torn = Directory.CreateTempSubdirectory("fedgrid-torn-").FullName;
        byte[] bytes = File.ReadAllBytes(Path.Combine(dir, RunFolderReader.TranscriptName));
        File.WriteAllBytes(Path.Combine(torn, RunFolderReader.TranscriptName), bytes[..(bytes.Length * 2 / 3)]);
        File.Copy(Path.Combine(dir, GroundTruthWriter.FileName), Path.Combine(torn, GroundTruthWriter.FileName));
        AuditRun run = RunFolderReader.Load(torn);
        Assert.Contains("torn", run.TranscriptNote);
        Assert.True(run.View.SlotCount is > 10 and < 96, $"{run.View.SlotCount} slots before the tear");
        ScoreCard card = Scorer.Score(run.View, Auditor.Attack(run.View), run.Truth!);
        Assert.True(Summary(card, Channel.PartialSums, PartialSumInversion.Name, Quantity.BaseLoad).RelativeRmse <= 1e-6);

        string[] lines = File.ReadAllLines(Path.Combine(dir, GroundTruthWriter.FileName));
        int header = Array.FindIndex(lines, l => !l.StartsWith('#'));
        lines[header] = lines[header].Replace("baseKw", "base");
        File.WriteAllLines(Path.Combine(torn, GroundTruthWriter.FileName), lines);
        var e = Assert.Throws<RunFolderException>(() => RunFolderReader.Load(torn));
        Assert.Contains(GroundTruthWriter.FileName + ":" + (header + 1), e.Message);
    }

    [Fact]
    public void Bus_aggregate_transcript_yields_bus_totals_only()
    {
        string dir = Train(ClearScheme.PrivateColumnsName, 1, projectionForm: new BusAggregateProjectionInputs());
        AuditRun run = RunFolderReader.Load(dir);
        Assert.Equal(BusAggregateProjectionInputs.FormName, run.Context.ProjectionInputs);
        Assert.All(run.View.Households, h => Assert.Empty(h.ReportedKw));
        Assert.All(run.View.Households, h => Assert.Null(h.SetpointKw));
        // The summed shares are the bus totals of the simulation record.
        int T = run.View.SlotCount;
        double[] totals = run.View.BusTotalsKw[Quantity.BaseLoad];
        for (int b = 0; b < run.View.BusIds.Count; b++)
            for (int t = 0; t < T; t += 7)
            {
                double truth = Enumerable.Range(0, run.View.Households.Count).Where(m => run.View.Households[m].Bus == b)
                    .Sum(m => run.Truth!.Kw(Quantity.BaseLoad, m)[t]);
                Assert.Equal(truth, totals[b * T + t], 1e-6); // fixed-point resolution 2^-24 kW per share
            }
        AttackResults results = Auditor.Attack(run.View);
        ScoreCard card = Scorer.Score(run.View, results, run.Truth!);
        // A household alone on its bus is handed over; households that share a bus are not.
        var perHousehold = card.Households.Where(h => h.Channel == Channel.ProjectionInputs && h.Attack == ProjectionInputAttack.BusShareName && h.Quantity == Quantity.BaseLoad).ToList();
        foreach (var h in perHousehold)
        {
            int bus = run.View.Households.Single(x => x.Id == h.HouseholdId).Bus;
            int count = run.View.Households.Count(x => x.Bus == bus);
            if (count == 1) Assert.True(h.Attacked.RelativeRmse < 1e-6, $"{h.HouseholdId} alone on its bus: {h.Attacked.RelativeRmse}");
            else Assert.True(h.Attacked.RelativeRmse > 1e-3, $"{h.HouseholdId} shares its bus with {count - 1}: {h.Attacked.RelativeRmse}");
        }
    }
}
