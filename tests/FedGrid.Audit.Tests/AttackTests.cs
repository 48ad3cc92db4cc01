using FedGrid.Audit.Attacks;
using FedGrid.Audit.Scoring;

namespace FedGrid.Audit.Tests;

public sealed class AttackTests
{
    private static ChannelSummary Summary(ScoreCard card, Channel c, string attack, Quantity q) =>
        card.Summaries.Single(s => s.Channel == c && s.Attack == attack && s.Quantity == q);

    private static (SyntheticRun Run, AttackResults Results, ScoreCard Card) Audit(SyntheticOptions o, AttackOptions? a = null)
    {
        SyntheticRun run = SyntheticRun.Build(o);
        AttackResults results = Auditor.Attack(run.View, a);
        return (run, results, Scorer.Score(run.View, results, run.Truth));
    }

    [Fact]
    public void Plain_partial_sums_give_every_quantity_exactly()
    {
        var (_, results, card) = Audit(new SyntheticOptions { PlainWeights = true });
        foreach (Quantity q in AuditNames.Quantities)
        {
            ChannelSummary s = Summary(card, Channel.PartialSums, PartialSumInversion.Name, q);
            Assert.True(s.RelativeRmse < 1e-6, $"{q}: {s.RelativeRmse}"); // float32 partial sums on the wire
            Assert.True(s.ExposureRatio < 1e-5);
            Assert.True(s.PriorRelativeRmse > 0.2, $"{q}: prior {s.PriorRelativeRmse}");
        }
        Identifiability id = results.Identifiability.First(i => i.Channel == Channel.PartialSums);
        Assert.Equal(4, id.Rank);
        Assert.True(id.ConditionNumber is > 1 and < 1e3);
        Assert.True(id.BaseLoadBoundStdKw < 1e-6);
    }

    [Fact]
    public void Plain_partial_sums_in_float32_meet_one_in_a_million()
    {
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = true, Float32 = true });
        ChannelSummary s = Summary(card, Channel.PartialSums, PartialSumInversion.Name, Quantity.BaseLoad);
        Assert.True(s.RelativeRmse <= 1e-6, $"{s.RelativeRmse}");
        Assert.True(s.RelativeRmse > 1e-12, "float32 rounding must show");
    }

    [Fact]
    public void Fewer_neurons_than_features_reports_the_rank_deficit_and_stays_near_the_prior()
    {
        var (_, results, card) = Audit(new SyntheticOptions { PlainWeights = true, Neurons = 2 });
        Identifiability id = results.Identifiability.First(i => i.Channel == Channel.PartialSums);
        Assert.Equal(2, id.Rank);
        Assert.Contains("rank 2 < 4", id.Note);
        ChannelSummary s = Summary(card, Channel.PartialSums, PartialSumInversion.Name, Quantity.BaseLoad);
        Assert.True(s.ExposureRatio is > 0.05 and < 1.0, $"{s.ExposureRatio}");
    }

    [Fact]
    public void Private_columns_prior_projection_beats_the_prior_and_the_meter_beats_both()
    {
        var (_, results, card) = Audit(new SyntheticOptions { PlainWeights = false });
        Assert.DoesNotContain(results.Reconstructions, r => r.Attack == PartialSumInversion.Name);
        ChannelSummary proj = Summary(card, Channel.PartialSums, SubspaceAttack.PriorProjectionName, Quantity.BaseLoad);
        ChannelSummary meter = Summary(card, Channel.PartialSums, SubspaceAttack.MeterCalibrationName, Quantity.BaseLoad);
        Assert.True(proj.ExposureRatio < 1, $"projection {proj.ExposureRatio}");
        Assert.True(meter.ExposureRatio < proj.ExposureRatio, $"meter {meter.ExposureRatio} vs projection {proj.ExposureRatio}");
        Identifiability id = results.Identifiability.First(i => i.Attack == SubspaceAttack.PriorProjectionName);
        Assert.Equal(4, id.Rank);

        var (_, noMeter, _) = Audit(new SyntheticOptions { PlainWeights = false }, new AttackOptions { UseSubstationMeter = false });
        Assert.DoesNotContain(noMeter.Reconstructions, r => r.Attack == SubspaceAttack.MeterCalibrationName);
        Assert.Contains(noMeter.Notes, n => n.Contains("no substation meter"));
    }

    [Fact]
    public void Private_columns_with_one_household_is_exact_from_the_meter()
    {
        // With a single household, meter − setpoint − known loads is its base load plus a loss term the regression models exactly.
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = false, Households = 1, HouseholdsPerBus = 1 }, new AttackOptions { SubstationMeterStdKw = 1e-6 });
        ChannelSummary meter = Summary(card, Channel.PartialSums, SubspaceAttack.MeterCalibrationName, Quantity.BaseLoad);
        Assert.True(meter.RelativeRmse < 1e-4, $"{meter.RelativeRmse}");
    }

    [Fact]
    public void One_local_sample_upload_gives_the_input_exactly()
    {
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = false, SlotsPerRound = 1, UploadSamples = 1, Days = 1 });
        foreach (Quantity q in AuditNames.Quantities)
        {
            ChannelSummary s = Summary(card, Channel.Uploads, UploadRatioAttack.Name, q);
            Assert.True(s.RelativeRmse < 1e-9, $"{q}: {s.RelativeRmse}");
        }
    }

    [Fact]
    public void Many_sample_upload_gives_the_weighted_mean_of_the_samples()
    {
        var (run, results, _) = Audit(new SyntheticOptions { PlainWeights = false, UploadSamples = 96 });
        for (int m = 0; m < run.View.Households.Count; m++)
        {
            Reconstruction r = results.Reconstructions.Single(x => x.Channel == Channel.Uploads && x.Household == m && x.Quantity == Quantity.BaseLoad);
            for (int round = 0; round < 2; round++)
            {
                double target = run.UploadWeightedBaseKw[m][round];
                double prior = run.View.Households[m].Priors[Quantity.BaseLoad].MeanKw[round * 96 + 10];
                // The estimate is the weighted mean pulled towards the prior by the rows' spread; it must lie between them, near the mean.
                double e = r.EstimateKw[round * 96 + 10];
                Assert.True(Math.Min(target, prior) - 1e-9 <= e && e <= Math.Max(target, prior) + 1e-9, $"{e} not between {target} and {prior}");
            }
        }
    }

    [Fact]
    public void Per_household_projection_inputs_hand_over_everything()
    {
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = false, HouseholdProjectionInputs = true });
        foreach (Quantity q in AuditNames.Quantities)
            Assert.True(Summary(card, Channel.ProjectionInputs, ProjectionInputAttack.ReportedName, q).RelativeRmse < 1e-15);
        Assert.True(Summary(card, Channel.Joint, JointAttack.Name, Quantity.BaseLoad).RelativeRmse < 1e-6);
    }

    [Fact]
    public void Bus_aggregate_inputs_are_exact_with_one_household_per_bus_and_conserve_bus_totals_otherwise()
    {
        var (_, _, single) = Audit(new SyntheticOptions { PlainWeights = false, BusAggregateInputs = true, HouseholdsPerBus = 1 });
        Assert.True(Summary(single, Channel.ProjectionInputs, ProjectionInputAttack.BusShareName, Quantity.BaseLoad).RelativeRmse < 1e-12);
        var (run, results, card) = Audit(new SyntheticOptions { PlainWeights = false, BusAggregateInputs = true, HouseholdsPerBus = 3 });
        var recs = results.Reconstructions.Where(r => r.Attack == ProjectionInputAttack.BusShareName && r.Quantity == Quantity.BaseLoad).ToList();
        for (int t = 0; t < run.View.SlotCount; t += 17)
        {
            double est = recs.Where(r => run.View.Households[r.Household].Bus == 0).Sum(r => r.EstimateKw[t]);
            double truth = Enumerable.Range(0, 3).Sum(m => run.BaseKw[m][t]);
            Assert.Equal(truth, est, 9);
        }
        double ratio = Summary(card, Channel.ProjectionInputs, ProjectionInputAttack.BusShareName, Quantity.BaseLoad).ExposureRatio;
        Assert.True(ratio is > 0.1 and < 1.2, $"{ratio}");
    }

    [Fact]
    public void Physical_floor_is_exact_for_a_lone_household_without_flexible_load()
    {
        // With no flexible load the prior base share of the total is taken as the prior's; make the prior total equal the prior base by
        // zeroing flexible truth and comparing against the metered total times the prior base fraction.
        var (run, results, _) = Audit(new SyntheticOptions { PlainWeights = false, HouseholdsPerBus = 1, FlexZero = true });
        Reconstruction r = results.Reconstructions.First(x => x.Channel == Channel.PhysicalFloor && x.Household == 0);
        double[] priorBase = run.View.Households[0].Priors[Quantity.BaseLoad].MeanKw;
        double[] priorTotal = run.View.Households[0].PriorTotalKw;
        for (int t = 0; t < run.View.SlotCount; t += 13)
            Assert.Equal(run.BaseKw[0][t] * priorBase[t] / priorTotal[t], r.EstimateKw[t], 12);
    }

    [Fact]
    public void Occupancy_from_an_exact_base_load_beats_the_prior_guess()
    {
        var (_, results, card) = Audit(new SyntheticOptions { PlainWeights = true, Households = 8 });
        Assert.Equal(8, results.Occupancy.Count);
        Assert.True(card.OccupancyAccuracy > card.PriorOccupancyAccuracy, $"{card.OccupancyAccuracy} vs prior {card.PriorOccupancyAccuracy}");
        Assert.True(card.OccupancyAccuracy > 0.8, $"{card.OccupancyAccuracy}");
    }

    [Fact]
    public void Occupancy_thresholds_separate_a_known_case()
    {
        // Slot 0: away at 0.1 and 0.2 kW, home at 0.5 and 0.9 kW → threshold midway, 0.35. Slot 1: always home → −∞.
        double[][] kw = [[0.1, 0.3], [0.2, 0.1], [0.5, 0.2], [0.9, 0.4]];
        bool[][] occ = [[false, true], [false, true], [true, true], [true, true]];
        (double[] tau, double[] p) = OccupancyThresholds.Calibrate(kw, occ, 2);
        Assert.Equal(0.35, tau[0], 12);
        Assert.Equal(double.NegativeInfinity, tau[1]);
        Assert.Equal(0.5, p[0], 12);
        Assert.Equal(1.0, p[1], 12);
    }

    [Fact]
    public void Joint_fusion_takes_the_exact_channel()
    {
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = true, UploadSamples = 96 });
        ChannelSummary joint = Summary(card, Channel.Joint, JointAttack.Name, Quantity.BaseLoad);
        ChannelSummary uploads = Summary(card, Channel.Uploads, UploadRatioAttack.Name, Quantity.BaseLoad);
        Assert.True(joint.RelativeRmse < 1e-6, $"{joint.RelativeRmse}");
        Assert.True(uploads.RelativeRmse > 0.05);
    }

    [Fact]
    public void An_uninformative_transcript_scores_an_exposure_ratio_near_one()
    {
        // Partial sums and uploads of pure noise: the attacks detect that the observations do not fit their model and fall back to the prior.
        foreach (bool plain in new[] { true, false })
        {
            // No meters either: the physical floor is real information, this transcript is to carry none.
            SyntheticRun run = SyntheticRun.Build(new SyntheticOptions { PlainWeights = plain, PartialSumsAreNoise = true, UploadSamples = 96, UploadsAreNoise = true });
            AttackerView view = run.View with { BusMeterKw = null, SubstationMeterKw = null };
            AttackResults results = Auditor.Attack(view);
            ScoreCard card = Scorer.Score(view, results, run.Truth);
            foreach (ChannelSummary s in card.Summaries.Where(s => s.Channel is Channel.PartialSums or Channel.Uploads or Channel.Joint))
                Assert.True(Math.Abs(s.ExposureRatio - 1) < 0.05, $"plain={plain} {s.Channel}/{s.Attack}/{s.Quantity}: {s.ExposureRatio}");
            Assert.Contains(results.Identifiability, i => i.Note.Contains("noise"));
        }
    }

    [Fact]
    public void Without_priors_the_attacks_still_run_on_a_flat_prior()
    {
        var (_, _, card) = Audit(new SyntheticOptions { PlainWeights = true }, new AttackOptions { UsePriors = false });
        Assert.True(Summary(card, Channel.PartialSums, PartialSumInversion.Name, Quantity.BaseLoad).RelativeRmse < 1e-6);
    }
}
