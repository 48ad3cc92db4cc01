using System.Collections.Immutable;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Learning.Randomness;

namespace FedGrid.Hosting;

/// <summary>
/// What every process of a multi-process run agrees on: the default scenario's seed, its days, how many of its
/// households take part (the first N) and the round length. The coordinator, each household and the in-process
/// reference derive everything else from these, so one seed gives one run whichever way it is hosted.
/// </summary>
/// <param name="Seed">Seed of the households, their data and the learner.</param>
/// <param name="Days">Simulated days.</param>
/// <param name="Households">Households taking part (the first N of the default scenario's 32).</param>
/// <param name="StepsPerRound">Decision steps per round.</param>
/// <param name="Scheme">The scheme's name (<see cref="FederationSchemes.Names"/>; the DP schemes with their default settings).</param>
public sealed record HostedRunSettings(ulong Seed, int Days, int Households, int StepsPerRound = SlotCalendar.SlotsPerDay, string Scheme = ClearScheme.PlainName)
{
    /// <summary>Checks the ranges and names the bad field.</summary>
    /// <exception cref="ArgumentException">A field is out of range.</exception>
    public void Validate()
    {
        int max = DefaultScenario.CreateHouseholds(Seed).Length;
        if (Households < 1 || Households > max)
        {
            throw new ArgumentException($"households must be between 1 and {max}, got {Households}");
        }
        if (Days < 1 || Days > 366)
        {
            throw new ArgumentException($"days must be between 1 and 366, got {Days}");
        }
        if (StepsPerRound < 1)
        {
            throw new ArgumentException($"steps per round must be at least 1, got {StepsPerRound}");
        }
        if (!FederationSchemes.Names.Contains(Scheme))
        {
            throw new ArgumentException($"scheme '{Scheme}' is unknown; use {FederationSchemes.NameList()}");
        }
    }

    /// <summary>Whether the hosts can checkpoint this run (<c>--state</c>): the clear schemes only, the rule the state
    /// machines' snapshots apply to the scheme object itself; the masked-sums key material and the DP layer's state are
    /// not written to checkpoints.</summary>
    public bool Checkpointable => FederationSchemes.FromName(Scheme) is ClearScheme;

    /// <summary>Throws when the run cannot be checkpointed (see <see cref="Checkpointable"/>), before any process starts work.</summary>
    /// <exception cref="ArgumentException">The scheme keeps state the checkpoints do not hold.</exception>
    public void RequireCheckpointable()
    {
        if (!Checkpointable)
        {
            throw new ArgumentException($"--state: scheme '{Scheme}' cannot be checkpointed (its keys, shares or noise state are not written to checkpoints); " +
                $"use --scheme {ClearScheme.PlainName} or {ClearScheme.PrivateColumnsName} with --state, or run without --state");
        }
    }

    /// <summary>The operator's scenario: the default scenario cut to the first <see cref="Households"/> households.</summary>
    /// <returns>The scenario.</returns>
    public Scenario CreateScenario()
    {
        Validate();
        Scenario s = DefaultScenario.Create(Seed, Days);
        return s with { Households = s.Households[..Households], Traces = s.Traces[..Households] };
    }

    /// <summary>One household's own view: the feeder, tariff and calendar (public) and its own household and trace only.</summary>
    /// <param name="full">The scenario of <see cref="CreateScenario"/>.</param>
    /// <param name="householdId">The household's id.</param>
    /// <returns>The household's index m and its one-household scenario.</returns>
    /// <exception cref="ArgumentException">The id is not on the roster.</exception>
    public static (int Index, Scenario Own) OwnView(Scenario full, string householdId)
    {
        ArgumentNullException.ThrowIfNull(full);
        for (int m = 0; m < full.Households.Length; m++)
        {
            if (full.Households[m].Id == householdId)
            {
                return (m, full with { Households = [full.Households[m]], Traces = [full.Traces[m]], FixedLoads = ImmutableArray<FixedBusLoad>.Empty });
            }
        }
        throw new ArgumentException($"household '{householdId}' is not among the scenario's {full.Households.Length} households");
    }

    /// <summary>The run's settings: the scheme of <see cref="Scheme"/>, the centralized actor-critic's learner settings and seed (as <c>fedgrid train --mode federated</c>).</summary>
    /// <returns>The options.</returns>
    public FederatedRunOptions CreateRunOptions() => new()
    {
        Scheme = FederationSchemes.FromName(Scheme),
        Federation = new FederationOptions
        {
            Learning = TrainingDefaults.ActorCritic with { Seed = LearningRandom.DeriveSeed(Seed, 0xAC) },
            StepsPerRound = StepsPerRound,
        },
    };

    /// <summary>Runs the same settings in one process (<see cref="InProcessFederation"/>) and returns its model's hash and result.</summary>
    /// <param name="adjust">Changes the run options first (e.g. scripted dropouts), or null.</param>
    /// <returns>SHA-256 of the final model and the run's result.</returns>
    public (byte[] ModelSha256, FederatedRunResult Result) RunInProcess(Func<FederatedRunOptions, FederatedRunOptions>? adjust = null)
    {
        FederatedRunOptions options = CreateRunOptions();
        var runner = new InProcessFederation(CreateScenario(), adjust is null ? options : adjust(options));
        FederatedRunResult r = runner.Run();
        return (RunHashes.Model(runner.Coordinator.Actor.Parameters, runner.Coordinator.Critic.Parameters), r);
    }

    /// <summary>The settings as command-line arguments of the <c>coordinator</c> and <c>household</c> verbs.</summary>
    /// <returns>Arguments.</returns>
    public IEnumerable<string> ToArguments() =>
    [
        "--households", Households.ToString(System.Globalization.CultureInfo.InvariantCulture),
        "--days", Days.ToString(System.Globalization.CultureInfo.InvariantCulture),
        "--seed", Seed.ToString(System.Globalization.CultureInfo.InvariantCulture),
        "--steps-per-round", StepsPerRound.ToString(System.Globalization.CultureInfo.InvariantCulture),
        "--scheme", Scheme,
    ];
}
