using System.Collections.Immutable;
using System.Diagnostics;
using FedGrid.Federation.Coordination;
using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Projection;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;
using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Randomness;

namespace FedGrid.Federation.Runs;

/// <summary>Settings of an in-process federated run.</summary>
public sealed record FederatedRunOptions
{
    /// <summary>The scheme (plain when null).</summary>
    public IFederationScheme? Scheme { get; init; }

    /// <summary>Protocol and learning settings.</summary>
    public FederationOptions Federation { get; init; } = new();

    /// <summary>Projection-input form (household form when null).</summary>
    public IProjectionInputsForm? ProjectionForm { get; init; }

    /// <summary>Projection settings (defaults when null).</summary>
    public ProjectionOptions? Projection { get; init; }

    /// <summary>Transcript file to write, or null for none.</summary>
    public string? TranscriptPath { get; init; }

    /// <summary>Simulation-only ground-truth file to write, or null for none.</summary>
    public string? GroundTruthPath { get; init; }

    /// <summary>Probability that a selected household's upload is lost (a simulated dropout, drawn from the seed); the round then closes at its deadline.</summary>
    public double UploadDropout { get; init; }

    /// <summary>
    /// Simulation only: alters household m's upload on its way to the coordinator (a simulated malicious household, for
    /// testing robust aggregation), or null. Called with the household index and the message before delivery.
    /// </summary>
    public Action<int, ParameterUpload>? SimulatedUploadTamper { get; init; }

    /// <summary>
    /// Probability, per decision step and online household, that the household goes offline before sending its partial
    /// sums (drawn from the seed; the simulation always keeps one household online). The step then closes at its deadline
    /// (<see cref="Coordinator.CloseStep"/>) without it.
    /// </summary>
    public double StepDropout { get; init; }

    /// <summary>Scripted per-step dropouts: household h goes offline at step s (counted over the run) at the given point.</summary>
    public IReadOnlyList<ScriptedDropout> ScriptedDropouts { get; init; } = [];

    /// <summary>Whether a household that went offline comes back (<see cref="HouseholdAgent.Rejoin"/>) at the next round's start; otherwise it stays offline.</summary>
    public bool RejoinAfterDropout { get; init; } = true;
}

/// <summary>Where in a decision step a simulated household goes offline.</summary>
public enum DropoutPoint
{
    /// <summary>Before it sends the step's partial sums.</summary>
    BeforePartialSums,
    /// <summary>After its partial sums, before its projection inputs.</summary>
    BeforeProjectionInputs,
    /// <summary>Masked sums: after its partial sums, before it answers a recovery request (it never answers).</summary>
    BeforeRecoveryShares,
    /// <summary>At the round's last step (the dropout's step), after its costs, before its upload (the upload is lost).</summary>
    BeforeUpload,
}

/// <summary>A scripted dropout of the in-process simulation.</summary>
/// <param name="Household">Household index.</param>
/// <param name="Step">Decision step, counted over the run (its round is step / steps per round).</param>
/// <param name="Point">Where in the step.</param>
public sealed record ScriptedDropout(int Household, long Step, DropoutPoint Point = DropoutPoint.BeforePartialSums);

/// <summary>What a federated run produced.</summary>
/// <param name="Run">Days, decision steps, updates, wall time (as the centralized trainer reports them).</param>
/// <param name="Scheme">Scheme name.</param>
/// <param name="Rounds">Rounds closed (aggregated or failed).</param>
/// <param name="AggregatedRounds">Rounds aggregated.</param>
/// <param name="FailedRounds">Rounds whose quorum failed.</param>
/// <param name="TranscriptBytes">Size of the transcript file, bytes (0 without one).</param>
/// <param name="TranscriptRecords">Records in the transcript.</param>
/// <param name="WireBytes">Bytes that crossed the wire in both directions, counted per household (a broadcast once per recipient), protobuf encoding of the envelopes.</param>
/// <param name="BytesPerHouseholdPerStep">WireBytes / (households · decision steps).</param>
public sealed record FederatedRunResult(TrainingRun Run, string Scheme, int Rounds, int AggregatedRounds, int FailedRounds,
    long TranscriptBytes, ulong TranscriptRecords, long WireBytes, double BytesPerHouseholdPerStep);

/// <summary>
/// Runs the protocol in one process: one <see cref="Coordinator"/>, one <see cref="HouseholdAgent"/> per household, and
/// the simulator (<see cref="HouseholdControlTask"/> without its own projection: the coordinator projects) as the
/// physical world. Every value between households and coordinator passes as a message through this runner, in the order
/// a transport would deliver them; households read only their own slice of the world. The households' round-end
/// training runs in parallel (each works on its own data; results are delivered in household order, so a seed gives the
/// same run). Deterministic per seed.
/// <para>
/// Simulated per-step dropouts (<see cref="FederatedRunOptions.StepDropout"/>, <see cref="FederatedRunOptions.ScriptedDropouts"/>):
/// an offline household's messages are lost both ways, the runner closes the step at its deadline, and the offline
/// gateway no longer controls its flexible load: the world runs it at the desired power (no curtailment) until the
/// household rejoins at a later round's start.
/// </para>
/// <para>
/// Warm start (<see cref="FederationOptions.WarmStartSteps"/>): on those steps each simulated gateway runs the price rule
/// (<see cref="PriceThresholdPolicy"/> with <see cref="TrainingDefaults.RuleThreshold"/> of <see cref="WarmStartRule.Peak"/>) on
/// its own readings and the public prices and hands its setpoint to its household machine as the step's demonstration.
/// </para>
/// </summary>
public sealed class InProcessFederation : ICoordinatorOutbox
{
    private readonly Scenario _scenario;
    private readonly FederatedRunOptions _options;
    private readonly HouseholdControlTask _task;
    private readonly HouseholdAgent[] _agents;
    private readonly Queue<HouseholdMessage> _inbox = new();
    private readonly IFederationScheme _scheme;
    private readonly List<DayMetrics> _days = [];
    private readonly Stopwatch _watch = new();
    private readonly float[] _state, _actions, _costs;
    private readonly double[] _truthBase, _truthMin, _truthDes;
    private readonly HouseholdMessage?[] _replies;
    private readonly LearningRandom _dropout, _stepDropout;
    private readonly bool[] _offline;
    private readonly PriceThresholdPolicy _rule;
    private readonly double[] _demonstrations;
    private readonly DropoutPoint?[] _dropAt;
    private int _online;
    private GroundTruthWriter? _truth;
    private long _wireBytes, _step;
    private int _dayProjections, _dayUnverified, _dayInfeasible, _dayFailures;
    private bool _started;

    /// <summary>Sets up the households and the coordinator for a scenario.</summary>
    /// <param name="scenario">The scenario (its days are the budget).</param>
    /// <param name="options">Settings.</param>
    /// <param name="transcript">A transcript sink to use instead of a file (e.g. in tests), or null.</param>
    public InProcessFederation(Scenario scenario, FederatedRunOptions options, ITranscriptSink? transcript = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        ArgumentNullException.ThrowIfNull(options);
        _scenario = scenario;
        _options = options;
        _scheme = options.Scheme ?? ClearScheme.Plain();
        _task = new HouseholdControlTask(scenario, new HouseholdTaskOptions(Project: false));
        int n = scenario.Households.Length, features = _task.StateSizePerAgent;
        IProjectionInputsForm form = options.ProjectionForm ?? new HouseholdProjectionInputs();
        FederationOptions fed = options.Federation;
        CoordinatorSetup setup = CreateCoordinatorSetup(scenario, options, features);
        var (actorShape, criticShape) = Coordinator.Shapes(n, features, fed.Learning);
        if (transcript is null && options.TranscriptPath is not null)
        {
            var header = new TranscriptHeader
            {
                FormatVersion = TranscriptFormat.Version,
                Scheme = _scheme.Name,
                Seed = fed.Learning.Seed,
                FeederSha256 = Google.Protobuf.ByteString.CopyFrom(RunHashes.Feeder(scenario.Feeder)),
                ScenarioSha256 = Google.Protobuf.ByteString.CopyFrom(RunHashes.Scenario(scenario)),
                ActorShape = ShapeCodec.ToSpec(actorShape),
                CriticShape = ShapeCodec.ToSpec(criticShape),
                HouseholdCount = n,
                StepsPerRound = fed.StepsPerRound,
                ProjectionInputs = form.Name,
                FeederName = scenario.Feeder.Name,
                ScenarioName = scenario.Name,
                Participation = fed.Participation,
                MinQuorum = fed.MinQuorum,
                Writer = "FedGrid " + (typeof(InProcessFederation).Assembly.GetName().Version?.ToString(3) ?? "0"),
            };
            Writer = TranscriptWriter.Create(options.TranscriptPath, header);
            transcript = Writer;
        }
        Coordinator = new Coordinator(setup, transcript ?? NullTranscript.Instance);
        _agents = new HouseholdAgent[n];
        _state = new float[n * features];
        _actions = new float[n];
        _costs = new float[n];
        _truthBase = new double[n];
        _truthMin = new double[n];
        _truthDes = new double[n];
        _replies = new HouseholdMessage?[n];
        _dropout = new LearningRandom(LearningRandom.DeriveSeed(fed.Learning.Seed, 0xD809UL));
        _stepDropout = new LearningRandom(LearningRandom.DeriveSeed(fed.Learning.Seed, 0x57E9D809UL));
        _offline = new bool[n];
        _demonstrations = new double[n];
        _rule = new PriceThresholdPolicy(TrainingDefaults.RuleThreshold(scenario.Tariff, _task.Environment.SlotCount),
            PriceThresholdPolicy.DefaultReleaseSpreadSlots);
        _dropAt = new DropoutPoint?[n];
        _online = n;
        if (!(options.StepDropout >= 0 && options.StepDropout < 1))
        {
            throw new ArgumentOutOfRangeException(nameof(options), options.StepDropout, "StepDropout must lie in [0, 1)");
        }
        if ((options.StepDropout > 0 || options.ScriptedDropouts.Count > 0) && form is BusAggregateProjectionInputs)
        {
            throw new ArgumentException($"per-step dropouts are not supported with '{BusAggregateProjectionInputs.FormName}' projection inputs (a missing household's bus masks would not cancel)", nameof(options));
        }
        foreach (ScriptedDropout d in options.ScriptedDropouts)
        {
            if (d.Household < 0 || d.Household >= n || d.Step < 0)
            {
                throw new ArgumentOutOfRangeException(nameof(options), d, $"scripted dropout names household {d.Household} (0 … {n - 1}) at step {d.Step}");
            }
        }
        for (int m = 0; m < n; m++)
        {
            Household h = scenario.Households[m];
            _agents[m] = new HouseholdAgent(new HouseholdIdentity(h.Id, h.BusId, h.KvarPerKw, features), fed, _scheme,
                HouseholdSeed(fed, m), form);
        }
    }

    /// <summary>The seed of household m's agent (its local training stream); every host derives it the same way.</summary>
    /// <param name="federation">The run's protocol settings.</param>
    /// <param name="household">Block index m.</param>
    /// <returns>The seed.</returns>
    public static ulong HouseholdSeed(FederationOptions federation, int household)
    {
        ArgumentNullException.ThrowIfNull(federation);
        return LearningRandom.DeriveSeed(federation.Learning.Seed, 0x4000UL + (ulong)household);
    }

    /// <summary>The coordinator's setup for a scenario (roster in household order, feeder, fixed loads, scheme, form); every host builds it the same way.</summary>
    /// <param name="scenario">The scenario.</param>
    /// <param name="options">Run settings.</param>
    /// <param name="features">Features per household.</param>
    /// <returns>The setup.</returns>
    public static CoordinatorSetup CreateCoordinatorSetup(Scenario scenario, FederatedRunOptions options, int features)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        ArgumentNullException.ThrowIfNull(options);
        return new CoordinatorSetup(scenario.Feeder, scenario.Households.Select(h => h.Id).ToArray(), features,
            scenario.FixedLoads.Select(f => (f.BusId, f.Kw, f.Kvar)).ToArray(), options.Federation, options.Scheme ?? ClearScheme.Plain(),
            options.ProjectionForm ?? new HouseholdProjectionInputs(), options.Projection);
    }

    /// <summary>The coordinator.</summary>
    public Coordinator Coordinator { get; }

    /// <summary>The households, in block order.</summary>
    public IReadOnlyList<HouseholdAgent> Households => _agents;

    /// <summary>The simulator.</summary>
    public HouseholdControlTask World => _task;

    /// <summary>The transcript writer when the run writes a file.</summary>
    public TranscriptWriter? Writer { get; }

    /// <summary>Delivers a coordinator message to its recipient(s); their replies queue for the coordinator.</summary>
    /// <param name="message">The message.</param>
    void ICoordinatorOutbox.Send(CoordinatorMessage message)
    {
        int size = message.CalculateSize();
        if (message.HouseholdIndex == -1)
        {
            for (int m = 0; m < _agents.Length; m++)
            {
                if (!_offline[m])
                {
                    _wireBytes += size;
                    Enqueue(m, _agents[m].Receive(message));
                }
            }
        }
        else if (!_offline[message.HouseholdIndex])
        {
            _wireBytes += size;
            Enqueue(message.HouseholdIndex, _agents[message.HouseholdIndex].Receive(message));
        }
    }

    /// <summary>Whether household m is offline in the simulation (dropped out, not back yet).</summary>
    /// <param name="household">m.</param>
    /// <returns>True when offline.</returns>
    public bool IsOffline(int household) => _offline[household];

    /// <summary>Decision steps taken so far.</summary>
    public long StepCount => _step;

    /// <summary>Whether every slot of the scenario has been stepped.</summary>
    public bool Done => _task.HorizonOver;

    /// <summary>The days finished so far.</summary>
    public IReadOnlyList<DayMetrics> Days => _days;

    /// <summary>Admits every household (join requests, admissions, initial model). Called by the first <see cref="StepOnce"/> if needed.</summary>
    public void Start()
    {
        if (_started)
        {
            return;
        }
        _started = true;
        _watch.Start();
        if (_options.GroundTruthPath is not null)
        {
            _truth = new GroundTruthWriter(_options.GroundTruthPath);
        }
        foreach (HouseholdAgent a in _agents)
        {
            Deliver(a.Join());
        }
        Drain();
        _task.Reset(_options.Federation.Learning.Seed);
    }

    /// <summary>Runs one decision step for every household: partial sums, sums replies, proposals, projection, setpoints, the world's slot, costs, and at a round's end the training, uploads and broadcast.</summary>
    /// <param name="progress">Called when the step ends a day, or null.</param>
    /// <returns>False when the horizon is over (nothing was stepped).</returns>
    public bool StepOnce(Action<DayMetrics>? progress = null)
    {
        Start();
        if (_task.HorizonOver)
        {
            return false;
        }
        int n = _agents.Length, features = _task.StateSizePerAgent;
        FederationOptions fed = _options.Federation;
        long step = _step;
        _task.Observe(_state);
        ReadOnlySpan<double> baseKw = _task.Environment.BaseKw, min = _task.Environment.FlexMinKw, des = _task.Environment.FlexDesiredKw;
        bool dropouts = _options.StepDropout > 0 || _options.ScriptedDropouts.Count > 0;
        if (dropouts)
        {
            PlanDropouts(step);
        }
        bool warm = step < fed.WarmStartSteps;
        if (warm)
        {
            // Each gateway runs the demonstrator rule on its own readings and the public prices (household m's entry
            // depends on nothing but those and its own index); the runner evaluates all of them in one call.
            _rule.Decide(_task.Environment, _demonstrations);
        }
        for (int m = 0; m < n; m++)
        {
            if (_offline[m])
            {
                continue;
            }
            if (_dropAt[m] == DropoutPoint.BeforePartialSums)
            {
                GoOffline(m);
                continue;
            }
            double? demonstration = warm ? _demonstrations[m] : null;
            Deliver(_agents[m].BeginStep(step, _state.AsSpan(m * features, features), min[m], des[m], baseKw[m], demonstration));
        }
        Drain();
        while (Coordinator.StepOpen)
        {
            Coordinator.CloseStep(this); // the step's deadline: the coordinator goes on without the offline households
            Drain();
        }
        ProjectionResult p = Coordinator.LastProjection!;
        switch (p.Status)
        {
            case ProjectionStatus.Projected: _dayProjections++; break;
            case ProjectionStatus.Unverified: _dayProjections++; _dayUnverified++; break;
            case ProjectionStatus.Infeasible: _dayInfeasible++; break;
            case ProjectionStatus.SolverFailure: _dayFailures++; break;
        }
        for (int m = 0; m < n; m++)
        {
            // An offline gateway no longer curtails: its appliance runs at the desired power.
            _actions[m] = _offline[m] ? (float)des[m] : (float)_agents[m].Setpoint;
        }
        int slot = _task.Environment.Slot;
        if (_truth is not null)
        {
            baseKw.CopyTo(_truthBase);
            min.CopyTo(_truthMin);
            des.CopyTo(_truthDes);
        }
        bool dayOver = _task.Step(_actions, _costs);
        if (_truth is not null)
        {
            for (int m = 0; m < n; m++)
            {
                Household h = _scenario.Households[m];
                _truth.Write(step, _task.Day + 1, h.Id, m, h.BusId, _truthBase[m], _truthMin[m], _truthDes[m], _scenario.Traces[m].Occupied[slot],
                    _offline[m] ? _truthDes[m] : _agents[m].Proposal, _task.LastStep.HouseholdKw[m] - _truthBase[m], _costs[m]);
            }
        }
        bool roundEnd = (step + 1) % fed.StepsPerRound == 0;
        if (roundEnd)
        {
            Parallel.For(0, n, m => _replies[m] = _offline[m] ? null : _agents[m].CompleteStep(_costs[m]));
            bool lost = false;
            for (int m = 0; m < n; m++)
            {
                if (_replies[m] is { } r)
                {
                    bool scripted = _dropAt[m] == DropoutPoint.BeforeUpload && r.BodyCase == HouseholdMessage.BodyOneofCase.Upload;
                    if (scripted || (_options.UploadDropout > 0 && _dropout.NextDouble() < _options.UploadDropout))
                    {
                        lost = true;
                        if (Coordinator.MasksUploads)
                        {
                            GoOffline(m); // under masked uploads the coordinator drops a silent participant; it rejoins with fresh keys
                        }
                        continue;
                    }
                    if (_options.SimulatedUploadTamper is { } tamper && r.BodyCase == HouseholdMessage.BodyOneofCase.Upload)
                    {
                        tamper(m, r.Upload);
                    }
                    Deliver(r);
                    Drain();
                }
            }
            while (lost && Coordinator.Phase is CoordinatorPhase.CollectingUploads or CoordinatorPhase.CollectingUploadRecoveryShares)
            {
                Coordinator.CloseRound(this); // the upload (then the recovery) deadline
                Drain();
            }
            if (_online < n && _options.RejoinAfterDropout && Coordinator.Phase == CoordinatorPhase.CollectingPartialSums)
            {
                for (int m = 0; m < n; m++)
                {
                    if (_offline[m])
                    {
                        _offline[m] = false;
                        _online++;
                        Deliver(_agents[m].Rejoin());
                        Drain();
                    }
                }
            }
        }
        else
        {
            for (int m = 0; m < n; m++)
            {
                if (!_offline[m])
                {
                    Deliver(_agents[m].CompleteStep(_costs[m]));
                }
            }
            Drain();
        }
        _step = step + 1;
        if (dayOver)
        {
            DayMetrics d = _task.LastDay! with
            {
                Projections = _dayProjections,
                ProjectionTrouble = new ProjectionCounts(_dayUnverified, _dayInfeasible, _dayFailures),
            };
            _dayProjections = _dayUnverified = _dayInfeasible = _dayFailures = 0;
            _days.Add(d);
            progress?.Invoke(d);
            if (!_task.HorizonOver)
            {
                _task.NextDay();
            }
        }
        return true;
    }

    /// <summary>Runs every (remaining) day of the scenario, then ends the run (run-completed record, transcript closed).</summary>
    /// <param name="progress">Called after each day, or null.</param>
    /// <returns>The result.</returns>
    public FederatedRunResult Run(Action<DayMetrics>? progress = null)
    {
        while (StepOnce(progress))
        {
        }
        return Finish();
    }

    /// <summary>Ends the run: the coordinator records completion, files are closed.</summary>
    /// <returns>The result.</returns>
    public FederatedRunResult Finish()
    {
        Start();
        Coordinator.Finish();
        Writer?.Dispose();
        _truth?.Dispose();
        _watch.Stop();
        int n = _agents.Length;
        long transcriptBytes = Writer?.BytesWritten ?? 0;
        var run = new TrainingRun("actor-critic", [.. _days], _step, Coordinator.AggregatedRounds, _watch.Elapsed);
        return new FederatedRunResult(run, _scheme.Name, Coordinator.AggregatedRounds + Coordinator.FailedRounds, Coordinator.AggregatedRounds,
            Coordinator.FailedRounds, transcriptBytes, Writer?.RecordCount ?? 0, _wireBytes, _wireBytes / (double)(n * Math.Max(1, _step)));
    }

    private void PlanDropouts(long step)
    {
        Array.Clear(_dropAt);
        foreach (ScriptedDropout d in _options.ScriptedDropouts)
        {
            if (d.Step == step && !_offline[d.Household])
            {
                _dropAt[d.Household] = d.Point;
            }
        }
        if (_options.StepDropout > 0)
        {
            int planned = 0;
            for (int m = 0; m < _agents.Length; m++)
            {
                planned += _dropAt[m] is null ? 0 : 1;
            }
            for (int m = 0; m < _agents.Length; m++)
            {
                bool draw = _stepDropout.NextDouble() < _options.StepDropout; // one draw per household and step: the stream does not depend on who is online
                if (draw && !_offline[m] && _dropAt[m] is null && _online - planned > 1)
                {
                    _dropAt[m] = DropoutPoint.BeforePartialSums;
                    planned++;
                }
            }
        }
    }

    private void GoOffline(int m)
    {
        _offline[m] = true;
        _online--;
        _dropAt[m] = null;
    }

    private void Enqueue(int household, HouseholdMessage? message)
    {
        if (message is null)
        {
            return;
        }
        DropoutPoint? at = _dropAt[household];
        if ((at == DropoutPoint.BeforeProjectionInputs && message.BodyCase is HouseholdMessage.BodyOneofCase.ProjectionInputs or HouseholdMessage.BodyOneofCase.BusShares)
            || (at == DropoutPoint.BeforeRecoveryShares && message.BodyCase == HouseholdMessage.BodyOneofCase.RecoveryShares))
        {
            GoOffline(household); // the message is lost with the household
            return;
        }
        _inbox.Enqueue(message);
    }

    private void Deliver(HouseholdMessage? message)
    {
        if (message is not null)
        {
            _wireBytes += message.CalculateSize();
            Coordinator.Receive(message, this);
        }
    }

    private void Drain()
    {
        while (_inbox.TryDequeue(out HouseholdMessage? m))
        {
            Deliver(m);
        }
    }
}
