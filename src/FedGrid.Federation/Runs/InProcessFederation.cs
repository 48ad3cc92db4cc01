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
}

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
    private readonly LearningRandom _dropout;
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
            _wireBytes += (long)size * _agents.Length;
            foreach (HouseholdAgent a in _agents)
            {
                Enqueue(a.Receive(message));
            }
        }
        else
        {
            _wireBytes += size;
            Enqueue(_agents[message.HouseholdIndex].Receive(message));
        }
    }

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
        for (int m = 0; m < n; m++)
        {
            Deliver(_agents[m].BeginStep(step, _state.AsSpan(m * features, features), min[m], des[m], baseKw[m]));
        }
        Drain();
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
            _actions[m] = (float)_agents[m].Setpoint;
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
                    _agents[m].Proposal, _task.LastStep.HouseholdKw[m] - _truthBase[m], _costs[m]);
            }
        }
        bool roundEnd = (step + 1) % fed.StepsPerRound == 0;
        if (roundEnd)
        {
            Parallel.For(0, n, m => _replies[m] = _agents[m].CompleteStep(_costs[m]));
            bool lost = false;
            for (int m = 0; m < n; m++)
            {
                if (_replies[m] is { } r)
                {
                    if (_options.UploadDropout > 0 && _dropout.NextDouble() < _options.UploadDropout)
                    {
                        lost = true;
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
            if (lost && Coordinator.Phase == CoordinatorPhase.CollectingUploads)
            {
                Coordinator.CloseRound(this);
                Drain();
            }
        }
        else
        {
            for (int m = 0; m < n; m++)
            {
                Deliver(_agents[m].CompleteStep(_costs[m]));
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

    private void Enqueue(HouseholdMessage? message)
    {
        if (message is not null)
        {
            _inbox.Enqueue(message);
        }
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
