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
/// <param name="NoiseMultiplier">Noise multiplier of a differentially private scheme (set by <c>fedgrid sweep --noise</c>), or null.</param>
internal sealed record FederatedTrainOptions(string? Scheme = null, double? Participation = null, int? MinQuorum = null, int? StepsPerRound = null,
    string? ProjectionInputs = null, double? NoiseMultiplier = null);

/// <summary>
/// The federated mode of <c>fedgrid train</c>: the protocol of <see cref="InProcessFederation"/> in one process, with the
/// same learner settings and seed as the centralized actor-critic, and the centralized mode's metrics and run folder plus
/// the coordinator's transcript (<c>transcript.fgt</c>) and the simulation-only ground truth.
/// </summary>
internal static class TrainFederated
{
    public const string Mode = "federated";

    public static (Option[] Options, Func<ParseResult, FederatedTrainOptions> Read) CreateOptions()
    {
        var scheme = new Option<string?>("--scheme") { Description = $"federated mode: {ClearScheme.PlainName} (default), {ClearScheme.PrivateColumnsName} or {MaskedSumsScheme.SchemeName} (partial sums masked, the coordinator learns only their total)" };
        var participation = new Option<double?>("--participation") { Description = "federated mode: fraction of households called to train each round, in (0, 1] (default 1)" };
        var quorum = new Option<int?>("--min-quorum") { Description = "federated mode: fewest uploads with which a round is aggregated (default 1)" };
        var round = new Option<int?>("--steps-per-round") { Description = $"federated mode: decision steps per round (default {SlotCalendar.SlotsPerDay}, one day)" };
        var inputs = new Option<string?>("--projection-inputs")
        {
            Description = $"federated mode: how the projection's inputs reach the coordinator: {HouseholdProjectionInputs.FormName} (default; each household's own values) or {BusAggregateProjectionInputs.FormName} (masked shares; the coordinator learns bus totals only)",
        };
        return ([scheme, participation, quorum, round, inputs],
            p => new FederatedTrainOptions(p.GetValue(scheme), p.GetValue(participation), p.GetValue(quorum), p.GetValue(round), p.GetValue(inputs)));
    }

    public static string ModeLabel(TrainOptions options) =>
        options.Mode == Mode ? $"{Mode}-{options.Federated?.Scheme ?? ClearScheme.PlainName}" : options.Mode;

    public static void Validate(TrainOptions options)
    {
        FederatedTrainOptions f = options.Federated ?? new();
        if (options.Mode != Mode)
        {
            if (f.Scheme is not null || f.Participation is not null || f.MinQuorum is not null || f.StepsPerRound is not null || f.ProjectionInputs is not null || f.NoiseMultiplier is not null)
                throw new UserInputException("--scheme, --participation, --min-quorum, --steps-per-round and --projection-inputs need --mode federated");
            return;
        }
        if (options.Learner != "actor-critic")
            throw new UserInputException($"--learner: the federated mode trains the actor-critic only (got '{options.Learner}')");
        if (f.Scheme is not null && !FederationSchemes.Names.Contains(f.Scheme))
            throw new UserInputException($"--scheme: unknown scheme '{f.Scheme}'; use {FederationSchemes.NameList()}");
        if (f.NoiseMultiplier is not null)
            throw new UserInputException($"a noise multiplier needs a scheme of the train verb that takes one; '{f.Scheme ?? ClearScheme.PlainName}' does not");
        if (f.Participation is { } p && !(p > 0 && p <= 1))
            throw new UserInputException($"--participation must lie in (0, 1], got {p}");
        if (f.MinQuorum is < 1)
            throw new UserInputException($"--min-quorum must be at least 1, got {f.MinQuorum}");
        if (f.ProjectionInputs is not null && !ProjectionInputsForms.Names.Contains(f.ProjectionInputs))
            throw new UserInputException($"--projection-inputs: unknown form '{f.ProjectionInputs}'; use {string.Join(" or ", ProjectionInputsForms.Names)}");
        if (f.StepsPerRound is < 1)
            throw new UserInputException($"--steps-per-round must be at least 1, got {f.StepsPerRound}");
    }

    public static TrainOutcome Run(TrainContext c)
    {
        FederatedTrainOptions f = c.Federated ?? new();
        int households = c.Scenario.Households.Length;
        if (f.MinQuorum is { } q && q > households)
            throw new UserInputException($"--min-quorum {q} exceeds the scenario's {households} households");
        int days = c.Scenario.SlotCount / SlotCalendar.SlotsPerDay;
        var (noControl, oracle) = TrainCommand.Baselines(c);
        IFederationScheme scheme = FederationSchemes.FromName(f.Scheme ?? ClearScheme.PlainName);
        var fed = new FederationOptions
        {
            // The centralized actor-critic's settings and seed: the same budget and starting point.
            Learning = TrainingDefaults.ActorCritic with { Seed = LearningRandom.DeriveSeed(c.Seed, 0xAC) },
            Participation = f.Participation ?? 1,
            MinQuorum = f.MinQuorum ?? 1,
            StepsPerRound = f.StepsPerRound ?? SlotCalendar.SlotsPerDay,
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
        var summary = TrainingSummary.Create(Mode, r.Run, noControl, oracle, c.Scenario.Tariff.Name, c.Scenario.Name, households, c.Seed) with
        {
            Extra =
            [
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
            ],
        };
        return new TrainOutcome(r.Run, summary, noControl, oracle,
            [new("transcript", transcriptName), new("groundTruth", GroundTruthWriter.FileName)]);
    }
}
