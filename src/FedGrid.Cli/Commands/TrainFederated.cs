using System.CommandLine;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Households;
using FedGrid.Learning.Randomness;

namespace FedGrid.Cli.Commands;

/// <summary>Options of <c>fedgrid train --mode federated</c>.</summary>
/// <param name="Scheme">Scheme name, or null for plain.</param>
/// <param name="Participation">Fraction of households called to train per round, or null for 1.</param>
/// <param name="MinQuorum">Fewest uploads per aggregated round, or null for 1.</param>
/// <param name="StepsPerRound">Decision steps per round, or null for one day (96).</param>
/// <param name="ProjectionInputs">Projection-input form ("household" or "bus-aggregate"), or null for household.</param>
/// <param name="NoiseMultiplier">Noise multiplier z of a differentially private scheme (also set by <c>fedgrid sweep --noise</c>), or null for the default.</param>
/// <param name="ClipNorm">Clipping norm of each partial-sums vector under DP, or null for the default.</param>
/// <param name="UploadClipNorm">Clipping norm of each upload update under DP, or null for the default.</param>
/// <param name="Aggregation">Averaging rule of the uploads ("mean", "median", "trimmed-mean"), or null for mean.</param>
/// <param name="TrimFraction">Fraction trimmed from each end by the trimmed mean, or null for the default.</param>
/// <param name="MaskUploads">Mask the uploads too (masked-sums and dp-masked-sums with the mean only).</param>
/// <param name="Delta">δ of the DP schemes' (ε, δ) guarantee, or null for the default 1e-5.</param>
internal sealed record FederatedTrainOptions(string? Scheme = null, double? Participation = null, int? MinQuorum = null, int? StepsPerRound = null,
    string? ProjectionInputs = null, double? NoiseMultiplier = null, double? ClipNorm = null, double? UploadClipNorm = null,
    string? Aggregation = null, double? TrimFraction = null, bool MaskUploads = false, double? Delta = null);

/// <summary>
/// The federated mode of <c>fedgrid train</c>: the protocol of <see cref="InProcessFederation"/> in one process, with the
/// same learner settings and seed as the centralized actor-critic, and the centralized mode's metrics and run folder plus
/// the coordinator's transcript (<c>transcript.fgt</c>) and the simulation-only ground truth.
/// </summary>
internal static class TrainFederated
{
    public const string Mode = "federated";

    /// <summary>The averaging rules offered by <c>--aggregation</c>: option name → rule name of <see cref="UploadAggregators"/>.</summary>
    public static readonly IReadOnlyList<KeyValuePair<string, string>> Aggregations =
    [
        new("mean", "fedavg"),
        new(CoordinateMedianAggregator.RuleName, CoordinateMedianAggregator.RuleName),
        new(TrimmedMeanAggregator.RuleName, TrimmedMeanAggregator.RuleName),
    ];

    private static string AggregationList => string.Join(", ", Aggregations.Select(a => a.Key));

    /// <summary>The <c>--aggregation</c> option's value (mean when not given) and its rule name in <see cref="UploadAggregators"/>.</summary>
    private static (string Option, string Rule) Aggregation(FederatedTrainOptions f)
    {
        string option = f.Aggregation ?? Aggregations[0].Key;
        return (option, Aggregations.First(a => a.Key == option).Value);
    }

    public static (Option[] Options, Func<ParseResult, FederatedTrainOptions> Read) CreateOptions()
    {
        var scheme = new Option<string?>("--scheme")
        {
            Description = $"federated mode: {ClearScheme.PlainName} (default), {ClearScheme.PrivateColumnsName}, {MaskedSumsScheme.SchemeName} (partial sums masked, the coordinator learns only their total), " +
                          $"{DifferentiallyPrivateScheme.SchemeName} (private-columns with clipped, noised partial sums and uploads) or {DifferentiallyPrivateScheme.MaskedSchemeName} (dp whose noisy partial sums are also masked)",
        };
        var participation = new Option<double?>("--participation") { Description = "federated mode: fraction of households called to train each round, in (0, 1] (default 1)" };
        var quorum = new Option<int?>("--min-quorum") { Description = "federated mode: fewest uploads with which a round is aggregated (default 1)" };
        var round = new Option<int?>("--steps-per-round") { Description = $"federated mode: decision steps per round (default {SlotCalendar.SlotsPerDay}, one day)" };
        var inputs = new Option<string?>("--projection-inputs")
        {
            Description = $"federated mode: how the projection's inputs reach the coordinator: {HouseholdProjectionInputs.FormName} (default; each household's own values) or {BusAggregateProjectionInputs.FormName} (masked shares; the coordinator learns bus totals only)",
        };
        var noise = new Option<double?>("--noise-multiplier")
        {
            Description = $"dp schemes: noise standard deviation over the clipping norm, z > 0, on partial sums and uploads (default {DifferentialPrivacySettings.DefaultNoiseMultiplier})",
        };
        var clip = new Option<double?>("--clip-norm") { Description = $"dp schemes: L2 clipping norm of each partial-sums vector (default {DifferentialPrivacySettings.DefaultClipNorm})" };
        var uploadClip = new Option<double?>("--upload-clip-norm")
        {
            Description = $"dp schemes: L2 clipping norm of each upload's update, trained minus broadcast shared parameters (default {DifferentialPrivacySettings.DefaultUploadClipNorm})",
        };
        var aggregation = new Option<string?>("--aggregation") { Description = "federated mode: averaging of the uploads: mean (default, FedAvg), median (coordinate-wise) or trimmed-mean (coordinate-wise)" };
        var trim = new Option<double?>("--trim-fraction") { Description = $"--aggregation trimmed-mean: fraction dropped from each end per coordinate, in [0, 0.5) (default {UploadAggregators.DefaultTrimFraction})" };
        var maskUploads = new Option<bool>("--mask-uploads")
        {
            Description = $"{MaskedSumsScheme.SchemeName} and {DifferentiallyPrivateScheme.MaskedSchemeName}: mask each round's uploads too (fixed point in Z/2^64, pairwise masks); the coordinator learns only their sum (FedAvg; not with --aggregation median or trimmed-mean)",
        };
        var delta = new Option<double?>("--delta") { Description = $"dp schemes: δ of the reported (ε, δ) guarantee, in (0, 1) (default {DifferentialPrivacySettings.DefaultDelta})" };
        return ([scheme, participation, quorum, round, inputs, noise, clip, uploadClip, aggregation, trim, maskUploads, delta],
            p => new FederatedTrainOptions(p.GetValue(scheme), p.GetValue(participation), p.GetValue(quorum), p.GetValue(round), p.GetValue(inputs),
                p.GetValue(noise), p.GetValue(clip), p.GetValue(uploadClip), p.GetValue(aggregation), p.GetValue(trim), p.GetValue(maskUploads), p.GetValue(delta)));
    }

    public static string ModeLabel(TrainOptions options) =>
        options.Mode == Mode ? $"{Mode}-{options.Federated?.Scheme ?? ClearScheme.PlainName}" : options.Mode;

    public static void Validate(TrainOptions options)
    {
        FederatedTrainOptions f = options.Federated ?? new();
        if (options.Mode != Mode)
        {
            if (f != new FederatedTrainOptions())
                throw new UserInputException("--scheme, --participation, --min-quorum, --steps-per-round, --projection-inputs, --noise-multiplier, --clip-norm, --upload-clip-norm, --delta, --aggregation, --trim-fraction and --mask-uploads need --mode federated");
            return;
        }
        if (options.Learner != "actor-critic")
            throw new UserInputException($"--learner: the federated mode trains the actor-critic only (got '{options.Learner}')");
        string scheme = f.Scheme ?? ClearScheme.PlainName;
        if (!FederationSchemes.Names.Contains(scheme))
            throw new UserInputException($"--scheme: unknown scheme '{scheme}'; use {FederationSchemes.NameList()}");
        if (!FederationSchemes.IsDifferentiallyPrivate(scheme) && (f.NoiseMultiplier is not null || f.ClipNorm is not null || f.UploadClipNorm is not null || f.Delta is not null))
            throw new UserInputException($"--noise-multiplier, --clip-norm, --upload-clip-norm and --delta need --scheme {DifferentiallyPrivateScheme.SchemeName} or {DifferentiallyPrivateScheme.MaskedSchemeName}; '{scheme}' adds no noise");
        if (f.NoiseMultiplier is { } z && !(z > 0 && double.IsFinite(z)))
            throw new UserInputException($"--noise-multiplier must be positive and finite, got {z} (for no noise use {ClearScheme.PrivateColumnsName})");
        if (f.ClipNorm is { } cn && !(cn > 0 && double.IsFinite(cn)))
            throw new UserInputException($"--clip-norm must be positive and finite, got {cn}");
        if (f.UploadClipNorm is { } un && !(un > 0 && double.IsFinite(un)))
            throw new UserInputException($"--upload-clip-norm must be positive and finite, got {un}");
        if (f.Delta is { } dl && !(dl > 0 && dl < 1))
            throw new UserInputException($"--delta must lie strictly between 0 and 1, got {dl}");
        if (f.Aggregation is not null && Aggregations.All(a => a.Key != f.Aggregation))
            throw new UserInputException($"--aggregation: unknown rule '{f.Aggregation}'; use {AggregationList}");
        try
        {
            FederationSchemes.CheckMaskUploads(scheme, f.MaskUploads, Aggregation(f).Rule);
        }
        catch (ArgumentException e)
        {
            throw new UserInputException(e.Message);
        }
        if (f.TrimFraction is { } b)
        {
            if (f.Aggregation != TrimmedMeanAggregator.RuleName)
                throw new UserInputException($"--trim-fraction needs --aggregation {TrimmedMeanAggregator.RuleName}");
            if (!(b >= 0 && b < 0.5))
                throw new UserInputException($"--trim-fraction must lie in [0, 0.5), got {b}");
        }
        if (f.Participation is { } p && !(p > 0 && p <= 1))
            throw new UserInputException($"--participation must lie in (0, 1], got {p}");
        if (f.MinQuorum is < 1)
            throw new UserInputException($"--min-quorum must be at least 1, got {f.MinQuorum}");
        if (f.ProjectionInputs is not null && !ProjectionInputsForms.Names.Contains(f.ProjectionInputs))
            throw new UserInputException($"--projection-inputs: unknown form '{f.ProjectionInputs}'; use {string.Join(" or ", ProjectionInputsForms.Names)}");
        if (f.StepsPerRound is < 1)
            throw new UserInputException($"--steps-per-round must be at least 1, got {f.StepsPerRound}");
    }

    /// <summary>The DP settings of the options (defaults for what is not given).</summary>
    private static DifferentialPrivacySettings Privacy(FederatedTrainOptions f) => new(
        f.NoiseMultiplier ?? DifferentialPrivacySettings.DefaultNoiseMultiplier,
        f.ClipNorm ?? DifferentialPrivacySettings.DefaultClipNorm,
        f.UploadClipNorm ?? DifferentialPrivacySettings.DefaultUploadClipNorm,
        f.Delta ?? DifferentialPrivacySettings.DefaultDelta);

    public static TrainOutcome Run(TrainContext c)
    {
        FederatedTrainOptions f = c.Federated ?? new();
        int households = c.Scenario.Households.Length;
        if (f.MinQuorum is { } q && q > households)
            throw new UserInputException($"--min-quorum {q} exceeds the scenario's {households} households");
        int days = c.Scenario.SlotCount / SlotCalendar.SlotsPerDay;
        var (noControl, oracle) = TrainCommand.Baselines(c);
        (string aggregation, string rule) = Aggregation(f);
        double trim = f.TrimFraction ?? UploadAggregators.DefaultTrimFraction;
        IFederationScheme scheme = FederationSchemes.FromName(f.Scheme ?? ClearScheme.PlainName, () => UploadAggregators.Create(rule, trim), Privacy(f), f.MaskUploads);
        // The centralized actor-critic's settings, seed and warm start (the price rule acts on the first days, then each
        // household clones it on its own rows): the same budget and starting point.
        int warmDays = c.WarmStartDaysOf(days);
        int stepsPerRound = f.StepsPerRound ?? SlotCalendar.SlotsPerDay;
        if (warmDays * SlotCalendar.SlotsPerDay % stepsPerRound != 0)
            throw new UserInputException($"--warm-start-days {warmDays} ({warmDays * SlotCalendar.SlotsPerDay} steps) is not a whole number of rounds of --steps-per-round {stepsPerRound}");
        var fed = new FederationOptions
        {
            Learning = (warmDays > 0 ? TrainingDefaults.WarmStartedActorCritic : TrainingDefaults.ActorCritic) with { Seed = LearningRandom.DeriveSeed(c.Seed, 0xAC) },
            Participation = f.Participation ?? 1,
            MinQuorum = f.MinQuorum ?? 1,
            StepsPerRound = stepsPerRound,
            WarmStartSteps = warmDays * SlotCalendar.SlotsPerDay,
            LocalTraining = new LocalTrainingOptions { KeepOptimiserState = true },
        };
        IProjectionInputsForm form = ProjectionInputsForms.FromName(f.ProjectionInputs ?? HouseholdProjectionInputs.FormName);
        const string transcriptName = "transcript" + TranscriptFormat.Extension;
        var runner = new InProcessFederation(c.Scenario, new FederatedRunOptions
        {
            Scheme = scheme,
            Federation = fed,
            ProjectionForm = form,
            TranscriptPath = Path.Combine(c.Folder, transcriptName),
            GroundTruthPath = Path.Combine(c.Folder, GroundTruthWriter.FileName),
        });
        FederatedRunResult r = runner.Run(d => c.Progress.WriteLine(FormattableString.Invariant(
            $"train: federated {scheme.Name} ({form.Name} projection inputs): day {d.Day}/{days} cost {d.Cost:0.00} $ (no control {noControl[d.Day - 1].Cost:0.00}) peak {d.PeakKw:0.0} kW projections {d.Projections}")));
        var extra = new List<KeyValuePair<string, object>>
        {
                new("scheme", r.Scheme),
                new("projectionInputs", form.Name),
                new("rounds", r.Rounds),
                new("aggregatedRounds", r.AggregatedRounds),
                new("failedRounds", r.FailedRounds),
                new("participation", fed.Participation),
                new("minQuorum", fed.MinQuorum),
                new("stepsPerRound", fed.StepsPerRound),
                new("transcriptBytes", r.TranscriptBytes),
                new("transcriptRecords", (long)r.TranscriptRecords),
                new("bytesPerHouseholdPerStep", Math.Round(r.BytesPerHouseholdPerStep, 1)),
                new("aggregation", aggregation),
                new("warmStartDays", warmDays),
                new("maskUploads", f.MaskUploads),
        };
        if (rule == TrimmedMeanAggregator.RuleName) extra.Add(new("trimFraction", trim));
        PrivacyGuarantee? dp = null;
        if (scheme is DifferentiallyPrivateScheme d)
        {
            // Per household: every step's two partial-sums vectors and at most two updates per round begun.
            long roundsBegun = (r.Run.DecisionSteps + fed.StepsPerRound - 1) / fed.StepsPerRound;
            dp = d.Guarantee(r.Run.DecisionSteps, Math.Max(r.Rounds, roundsBegun));
            extra.Add(new("noiseMultiplier", d.NoiseMultiplier));
            extra.Add(new("clipNorm", d.ClipNorm));
            extra.Add(new("uploadClipNorm", d.Settings.UploadClipNorm));
            extra.Add(new("epsilonOrder", dp.Order));
            extra.Add(new("epsilonCovers", "partial sums and uploads; not the projection inputs"));
            extra.Add(new("partialSumsClippedPct", Math.Round(100.0 * d.PartialSumsClipped / Math.Max(1, d.PartialSumsReleased), 2)));
            extra.Add(new("uploadsClippedPct", Math.Round(100.0 * d.UpdatesClipped / Math.Max(1, d.UpdatesReleased), 2)));
        }
        var summary = TrainingSummary.Create(Mode, r.Run, noControl, oracle, c.Scenario.Tariff.Name, c.Scenario.Name, households, c.Seed) with
        {
            Epsilon = dp?.Epsilon,
            Delta = dp?.Delta,
            Extra = extra,
        };
        return new TrainOutcome(r.Run, summary, noControl, oracle,
            [new("transcript", transcriptName), new("groundTruth", GroundTruthWriter.FileName)]);
    }
}
