using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Audit.Scoring;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Audit.Tests;

/// <summary>End to end: a real federated run's transcript, read back and attacked.</summary>
public sealed class RunFolderTests
{
    internal static string Train(string scheme, int days, int stepsPerRound = 96, LocalOptimiser optimiser = LocalOptimiser.Adam)
    {
        string dir = Directory.CreateTempSubdirectory($"fedgrid-audit-{scheme}-").FullName;
        Scenario scenario = DefaultScenario.Create(DefaultScenario.DefaultSeed, days);
        var fed = new FederationOptions
        {
            Learning = TrainingDefaults.ActorCritic, StepsPerRound = stepsPerRound,
            LocalTraining = new LocalTrainingOptions { Optimiser = optimiser },
        };
        var run = new InProcessFederation(scenario, new FederatedRunOptions
        {
            Scheme = ClearScheme.FromName(scheme), Federation = fed,
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
        Assert.Contains(results.Identifiability, i => i.Channel == Channel.PartialSums && i.Rank == 10);
    }

    [Fact]
    public void One_local_sample_sgd_upload_recovers_the_trained_state()
    {
        string dir = Train(ClearScheme.PlainName, 1, stepsPerRound: 1, optimiser: LocalOptimiser.Sgd);
        AuditRun run = RunFolderReader.Load(dir);
        AttackResults results = Auditor.Attack(run.View);
        ScoreCard card = Scorer.Score(run.View, results, run.Truth!);
        // Every slot but the last is some round's single training sample (the last is only a bootstrap row, never trained on).
        int T = run.View.SlotCount;
        double sse = 0, sst = 0;
        foreach (Reconstruction r in results.Reconstructions.Where(r => r.Channel == Channel.Uploads && r.Quantity == Quantity.BaseLoad))
        {
            ErrorMetrics e = ErrorMetrics.Compute(run.Truth!.Kw(Quantity.BaseLoad, r.Household).AsSpan(0, T - 1), r.EstimateKw.AsSpan(0, T - 1));
            sse += e.SumSquaredError;
            sst += e.SumSquaredTruth;
        }
        Assert.Equal(32, results.Reconstructions.Count(r => r.Channel == Channel.Uploads && r.Quantity == Quantity.BaseLoad));
        double rel = Math.Sqrt(sse / sst);
        // Measured 7.3e-3 (seed of the default scenario): the limit is float32 quantisation of the uploaded parameters, not the attack —
        // with the default learning rate and gradient clipping a one-sample SGD step moves a weight of order 0.1 by about 1e-6, so
        // upload − broadcast keeps only two to three significant digits. The 1e-3 goal needs larger steps (or float64 uploads).
        Assert.True(rel <= 2e-2, $"pooled over trained slots {rel}");
        Assert.True(Summary(card, Channel.Uploads, UploadRatioAttack.Name, Quantity.BaseLoad).ExposureRatio < 0.1);
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
    public void A_missing_folder_or_transcript_is_named()
    {
        var e = Assert.Throws<RunFolderException>(() => RunFolderReader.Load("/nonexistent/run"));
        Assert.Contains("/nonexistent/run", e.Message);
        string empty = Directory.CreateTempSubdirectory("fedgrid-empty-").FullName;
        Assert.Contains("transcript.fgt", Assert.Throws<RunFolderException>(() => RunFolderReader.Load(empty)).Message);
    }
}
