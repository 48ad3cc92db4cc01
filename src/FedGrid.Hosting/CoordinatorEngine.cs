using System.Diagnostics;
using System.Threading.Channels;
using FedGrid.Federation.Coordination;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Households.Scenarios;
using Grpc.Core;
using Microsoft.Extensions.Logging;

namespace FedGrid.Hosting;

/// <summary>Settings of the coordinator host.</summary>
public sealed record CoordinatorHostOptions
{
    /// <summary>The run every process agrees on.</summary>
    public required HostedRunSettings Run { get; init; }

    /// <summary>How long a round waits for its uploads before it closes with what arrived.</summary>
    public TimeSpan RoundTimeout { get; init; } = TimeSpan.FromSeconds(60);

    /// <summary>
    /// How long a decision step's phase (partial sums, projection inputs) waits, from its first message, for the other
    /// households before <see cref="Coordinator.CloseStep"/> drops the missing ones for the round; null: a step waits for
    /// every household and a household that leaves ends the run.
    /// </summary>
    public TimeSpan? StepTimeout { get; init; }

    /// <summary>Transcript file to write, or null.</summary>
    public string? TranscriptPath { get; init; }

    /// <summary>Run folder for the round-end checkpoint (<c>coordinator.ckpt</c>), or null for none.</summary>
    public string? StateFolder { get; init; }

    /// <summary>Continue from the checkpoint in <see cref="StateFolder"/> when there is one (without it, an existing checkpoint is refused).</summary>
    public bool Resume { get; init; }

    /// <summary>Fault injection for tests: after writing the checkpoint of this round the coordinator stops taking messages (as a process about to be killed); −1 for never.</summary>
    public int HoldAfterCheckpointRound { get; init; } = -1;

    /// <summary>How long the run waits for a household that lost its connection to rejoin before it fails (with <see cref="StepTimeout"/>: before the step deadline drops it and the run goes on).</summary>
    public TimeSpan RejoinTimeout { get; init; } = TimeSpan.FromMinutes(5);

    /// <summary>Whether sessions come over mutual TLS: the client certificate must name the joining household (set by <see cref="CoordinatorHost.Build"/>).</summary>
    public bool ClientCertificates { get; init; }
}

/// <summary>One household's open session.</summary>
internal sealed class HouseholdSession(int index, string id, bool rejoin = false)
{
    /// <summary>Whether the session joins a run already under way (after a lost connection or a coordinator restart).</summary>
    public bool Rejoin { get; } = rejoin;

    public int Index { get; } = index;

    public string Id { get; } = id;

    public Channel<CoordinatorMessage> Outgoing { get; } = Channel.CreateUnbounded<CoordinatorMessage>(new UnboundedChannelOptions { SingleReader = true });

    /// <summary>Set when the coordinator ends this session with an error status.</summary>
    public TaskCompletionSource<Status> Fault { get; } = new(TaskCreationOptions.RunContinuationsAsynchronously);

    /// <summary>Trailers sent with <see cref="Fault"/> (the drop notice), or null.</summary>
    public Metadata? FaultTrailers { get; set; }
}

/// <summary>
/// The coordinator process's core: owns the <see cref="Coordinator"/> state machine and feeds it from one queue on one
/// thread. Messages of a phase (joins, a step's partial sums, its projection inputs, a round's uploads) are held until
/// every expected household has sent its own, then delivered in household order — the order of the in-process runner,
/// so the sums, the aggregate and the transcript are the same bit for bit whatever order the network delivered them.
/// A message the protocol does not expect now ends its sender's session with FAILED_PRECONDITION before the state
/// machine sees it.
/// </summary>
public sealed class CoordinatorEngine : ICoordinatorOutbox, IDisposable
{
    private readonly record struct Inbound(HouseholdSession? Session, HouseholdMessage? Message, bool Disconnected, int TimeoutRound, int RejoinCheck = -1,
        long TimeoutStep = -1, CoordinatorPhase TimeoutPhase = CoordinatorPhase.Admitting);

    /// <summary>File name of the coordinator's checkpoint in its run folder.</summary>
    public const string CheckpointFileName = "coordinator.ckpt";

    /// <summary>
    /// Trailer of the ABORTED status that ends the session of a household dropped at a step deadline (value
    /// "ROUND,STEP"): the household keeps its state and comes back with a <see cref="RejoinRequest"/> session.
    /// </summary>
    public const string DroppedTrailer = "fedgrid-dropped";

    private const string CheckpointKind = "coordinator";

    private readonly ILogger _log;
    private readonly CoordinatorHostOptions _options;
    private readonly Scenario _scenario;
    private readonly Coordinator _coordinator;
    private readonly TranscriptWriter? _writer;
    private readonly Channel<Inbound> _inbox = Channel.CreateUnbounded<Inbound>(new UnboundedChannelOptions { SingleReader = true });
    private readonly HouseholdSession?[] _sessions;
    private readonly HouseholdMessage?[] _pending;
    private readonly bool[] _selected;
    /// <summary>Households dropped at a step deadline whose rejoin the next round start waits for (up to the step deadline).</summary>
    private readonly bool[] _awaitRejoin;
    /// <summary>Members without a session inside their --rejoin-timeout window (the round start waits for them, not the step deadline).</summary>
    private readonly bool[] _reconnecting;
    /// <summary>Rejoin requests of dropped households that arrived mid-round, delivered at the next round start.</summary>
    private readonly HouseholdMessage?[] _rejoinHeld;
    private readonly Dictionary<string, int> _roster = new(StringComparer.Ordinal);
    private readonly TaskCompletionSource<CoordinatorOutcome> _done = new(TaskCreationOptions.RunContinuationsAsynchronously);
    private readonly Stopwatch _watch = new();
    private readonly object _gate = new();
    private readonly int _n;
    private readonly long _totalSteps;
    private int _pendingCount, _expectedUploads, _connected, _trainingRound = -1;
    private long _wireBytes;
    private volatile bool _finished;
    private readonly string? _checkpoint;
    private int _checkpointRound;
    private double _earlierSeconds;

    /// <summary>Masked sums: the key agreement after admission, held and delivered in household order like every phase.</summary>
    private enum KeyStage
    {
        /// <summary>No key agreement under way (not masked sums, or done).</summary>
        None,
        /// <summary>Waiting for every household's public keys (the coordinator then sends the directory).</summary>
        PublicKeys,
        /// <summary>Waiting for every household's encrypted key shares (the coordinator relays each to its holder).</summary>
        KeyShares,
    }

    private KeyStage _keyStage;

    /// <summary>Sets up the coordinator for the run.</summary>
    /// <param name="options">Settings.</param>
    /// <param name="log">Logger.</param>
    public CoordinatorEngine(CoordinatorHostOptions options, ILogger log)
    {
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(log);
        _options = options;
        _log = log;
        _scenario = options.Run.CreateScenario();
        FederatedRunOptions run = options.Run.CreateRunOptions();
        int features = Federation.Training.HouseholdControlTask.FeaturesPerHousehold;
        _n = _scenario.Households.Length;
        _totalSteps = _scenario.SlotCount;
        for (int m = 0; m < _n; m++)
        {
            _roster[_scenario.Households[m].Id] = m;
        }
        byte[]? snapshot = null;
        long transcriptBytes = -1;
        ulong transcriptRecords = 0;
        if (options.StateFolder is not null)
        {
            options.Run.RequireCheckpointable();
            Directory.CreateDirectory(options.StateFolder);
            _checkpoint = Path.Combine(options.StateFolder, CheckpointFileName);
            if (File.Exists(_checkpoint))
            {
                if (!options.Resume)
                {
                    throw new InvalidOperationException($"{_checkpoint}: the run folder holds a checkpoint; resume it (--resume) or choose an empty folder");
                }
                (snapshot, transcriptBytes, transcriptRecords, _wireBytes, _earlierSeconds) = CheckpointFile.Read(_checkpoint, options.Run, CheckpointKind, r =>
                    (r.ReadBytes(r.ReadInt32()), r.ReadInt64(), r.ReadUInt64(), r.ReadInt64(), r.ReadDouble()));
                if ((transcriptBytes >= 0) != (options.TranscriptPath is not null))
                {
                    throw new InvalidOperationException($"{_checkpoint}: the checkpointed run {(transcriptBytes >= 0 ? "wrote" : "did not write")} a transcript; resume it with the same --transcript");
                }
            }
        }
        if (options.TranscriptPath is not null && snapshot is not null)
        {
            _writer = TranscriptWriter.Append(options.TranscriptPath, transcriptBytes, transcriptRecords);
        }
        else if (options.TranscriptPath is not null)
        {
            var (a, c) = Coordinator.Shapes(_n, features, run.Federation.Learning);
            _writer = TranscriptWriter.Create(options.TranscriptPath, new TranscriptHeader
            {
                FormatVersion = TranscriptFormat.Version,
                Scheme = run.Scheme!.Name,
                Seed = run.Federation.Learning.Seed,
                FeederSha256 = Google.Protobuf.ByteString.CopyFrom(RunHashes.Feeder(_scenario.Feeder)),
                ScenarioSha256 = Google.Protobuf.ByteString.CopyFrom(RunHashes.Scenario(_scenario)),
                ActorShape = Federation.Protocol.ShapeCodec.ToSpec(a),
                CriticShape = Federation.Protocol.ShapeCodec.ToSpec(c),
                HouseholdCount = _n,
                StepsPerRound = run.Federation.StepsPerRound,
                ProjectionInputs = "household",
                FeederName = _scenario.Feeder.Name,
                ScenarioName = _scenario.Name,
                Participation = run.Federation.Participation,
                MinQuorum = run.Federation.MinQuorum,
                Writer = "FedGrid coordinator host " + (typeof(CoordinatorEngine).Assembly.GetName().Version?.ToString(3) ?? "0"),
            });
        }
        _coordinator = new Coordinator(InProcessFederation.CreateCoordinatorSetup(_scenario, run, features), _writer ?? (ITranscriptSink)NullTranscript.Instance);
        Checks = new MessageChecks(_coordinator.ActorShape.HiddenSizes[0], _coordinator.CriticShape.HiddenSizes[0], _n);
        _sessions = new HouseholdSession?[_n];
        _pending = new HouseholdMessage?[_n];
        _selected = new bool[_n];
        _awaitRejoin = new bool[_n];
        _reconnecting = new bool[_n];
        _rejoinHeld = new HouseholdMessage?[_n];
        if (snapshot is not null)
        {
            using var reader = new BinaryReader(new MemoryStream(snapshot));
            try
            {
                _coordinator.RestoreSnapshot(reader);
            }
            catch (InvalidDataException e)
            {
                throw new InvalidDataException($"{_checkpoint}: {e.Message}", e);
            }
            for (int m = 0; m < _n; m++)
            {
                // The first round start after a restart waits (up to the step deadline) for the households that were
                // dropped when the checkpoint was written, as the round start after their dropout did.
                _awaitRejoin[m] = _coordinator.IsDropped(m);
                // Every member has --rejoin-timeout to reconnect to the restarted coordinator.
                _reconnecting[m] = !_coordinator.IsDropped(m);
            }
            _checkpointRound = _coordinator.Round;
            _watch.Start();
            _log.LogInformation("resumed from {Checkpoint}: round {Round}, step {Step}, {Dropped} households dropped at a step deadline; waiting for the households to rejoin",
                _checkpoint, _coordinator.Round, _coordinator.Step + 1, DroppedCount());
        }
    }

    /// <summary>The round the last checkpoint was written for (0: none yet).</summary>
    public int CheckpointRound => _checkpointRound;

    private void WriteCheckpoint()
    {
        _writer?.FlushToDisk();
        using var buffer = new MemoryStream();
        using (var w = new BinaryWriter(buffer))
        {
            _coordinator.WriteSnapshot(w);
        }
        byte[] snapshot = buffer.ToArray();
        CheckpointFile.Write(_checkpoint!, _options.Run, CheckpointKind, w =>
        {
            w.Write(snapshot.Length);
            w.Write(snapshot);
            w.Write(_writer?.BytesWritten ?? -1);
            w.Write(_writer?.RecordCount ?? 0);
            w.Write(Interlocked.Read(ref _wireBytes));
            w.Write(_earlierSeconds + _watch.Elapsed.TotalSeconds);
        });
        _checkpointRound = _coordinator.Round;
        _log.LogInformation("checkpoint written: round {Round} starts at step {Step} ({Path})", _coordinator.Round, _coordinator.Step + 1, _checkpoint);
    }

    /// <summary>Settings.</summary>
    public CoordinatorHostOptions Options => _options;

    /// <summary>The stateless message checks of this run.</summary>
    public MessageChecks Checks { get; }

    /// <summary>Completes when the run is over (or failed).</summary>
    public Task<CoordinatorOutcome> Completion => _done.Task;

    /// <summary>The run's state now.</summary>
    /// <returns>A snapshot.</returns>
    public Hosting.Wire.RunStatus Status()
    {
        lock (_gate)
        {
            var s = new Hosting.Wire.RunStatus
            {
                HouseholdCount = _n,
                Connected = _connected,
                Round = _coordinator.Round,
                Step = _coordinator.Step,
                TotalSteps = _totalSteps,
                Finished = _finished,
                Rounds = _coordinator.AggregatedRounds + _coordinator.FailedRounds,
                WireBytes = _wireBytes,
                RunSeconds = _earlierSeconds + _watch.Elapsed.TotalSeconds,
            };
            if (_finished)
            {
                s.ModelSha256 = Google.Protobuf.ByteString.CopyFrom(RunHashes.Model(_coordinator.Actor.Parameters, _coordinator.Critic.Parameters));
            }
            return s;
        }
    }

    /// <summary>Opens a session for a join request (checks roster and duplicates; the join itself goes through the queue).</summary>
    internal HouseholdSession Open(JoinRequest join)
    {
        if (!_roster.TryGetValue(join.HouseholdId, out int m))
        {
            _log.LogWarning("rejected join: household '{Id}' is not on the roster", join.HouseholdId);
            throw new RpcException(new Status(StatusCode.NotFound, $"household '{join.HouseholdId}' is not on the roster"));
        }
        lock (_gate)
        {
            if (_finished)
            {
                throw new RpcException(new Status(StatusCode.FailedPrecondition, $"the run is over; household '{join.HouseholdId}' cannot join"));
            }
            if (_sessions[m] is not null)
            {
                _log.LogWarning("rejected join: household '{Id}' already has a session", join.HouseholdId);
                throw new RpcException(new Status(StatusCode.AlreadyExists, $"household '{join.HouseholdId}' already joined"));
            }
            bool rejoin = _coordinator.Phase != CoordinatorPhase.Admitting;
            var s = new HouseholdSession(m, join.HouseholdId, rejoin);
            _sessions[m] = s;
            _reconnecting[m] = false;
            _connected++;
            return s;
        }
    }

    /// <summary>The roster id at household index m, or null when m is not on the roster.</summary>
    internal string? RosterId(int m) => m >= 0 && m < _n ? _scenario.Households[m].Id : null;

    /// <summary>Opens a session for a rejoin request of a household dropped at a step deadline (index checked by the caller; the rejoin itself goes through the queue).</summary>
    internal HouseholdSession OpenDropped(int m)
    {
        string id = _scenario.Households[m].Id;
        lock (_gate)
        {
            if (_finished)
            {
                throw new RpcException(new Status(StatusCode.FailedPrecondition, $"the run is over; household '{id}' cannot rejoin"));
            }
            if (_sessions[m] is not null)
            {
                _log.LogWarning("rejected rejoin: household '{Id}' already has a session", id);
                throw new RpcException(new Status(StatusCode.AlreadyExists, $"household '{id}' already has a session"));
            }
            var s = new HouseholdSession(m, id, rejoin: true);
            _sessions[m] = s;
            _connected++;
            return s;
        }
    }

    /// <summary>Queues a checked message from a session.</summary>
    internal void Post(HouseholdSession session, HouseholdMessage message) => _inbox.Writer.TryWrite(new Inbound(session, message, false, -1));

    /// <summary>Queues the end of a session.</summary>
    internal void Closed(HouseholdSession session) => _inbox.Writer.TryWrite(new Inbound(session, null, true, -1));

    /// <summary>Runs the queue until the run is over.</summary>
    /// <param name="cancel">Stops the loop.</param>
    public async Task RunAsync(CancellationToken cancel)
    {
        for (int m = 0; m < _n; m++)
        {
            if (_reconnecting[m])
            {
                var absent = new HouseholdSession(m, _scenario.Households[m].Id); // resumed: the member has not reconnected yet
                int h = m;
                _ = Task.Delay(_options.RejoinTimeout).ContinueWith(_ => _inbox.Writer.TryWrite(new Inbound(absent, null, false, -1, h)), TaskScheduler.Default);
            }
        }
        try
        {
            await foreach (Inbound item in _inbox.Reader.ReadAllAsync(cancel))
            {
                if (item.TimeoutRound >= 0)
                {
                    OnTimeout(item.TimeoutRound);
                }
                else if (item.RejoinCheck >= 0)
                {
                    OnRejoinDeadline(item.RejoinCheck, item.Session!);
                }
                else if (item.TimeoutStep >= 0)
                {
                    OnStepTimeout(item.TimeoutStep, item.TimeoutPhase);
                }
                else if (item.Disconnected)
                {
                    OnClosed(item.Session!);
                }
                else
                {
                    OnMessage(item.Session!, item.Message!);
                }
                if (_done.Task.IsCompleted)
                {
                    break;
                }
                if (_checkpointRound == _options.HoldAfterCheckpointRound && _checkpointRound > 0)
                {
                    _log.LogWarning("holding after the checkpoint of round {Round} (fault injection)", _checkpointRound);
                    await Task.Delay(Timeout.Infinite, cancel);
                }
            }
        }
        catch (OperationCanceledException)
        {
            _done.TrySetResult(Outcome(false, "cancelled"));
        }
        catch (Exception e)
        {
            _log.LogError(e, "coordinator failed");
            _done.TrySetResult(Outcome(false, e.Message));
        }
        finally
        {
            foreach (HouseholdSession? s in _sessions)
            {
                s?.Outgoing.Writer.TryComplete();
            }
        }
    }

    private void OnMessage(HouseholdSession session, HouseholdMessage message)
    {
        if (_finished)
        {
            Reject(session, StatusCode.FailedPrecondition, $"the run is over; {message.BodyCase} from household {session.Index} not taken");
            return;
        }
        int m = session.Index;
        if (message.BodyCase == HouseholdMessage.BodyOneofCase.Rejoin)
        {
            OnDroppedRejoin(session, message);
            return;
        }
        if (session.Rejoin && message.BodyCase == HouseholdMessage.BodyOneofCase.Join)
        {
            OnRejoin(session, message);
            return;
        }
        string? wrong = Expected(m, message);
        if (wrong is not null)
        {
            Reject(session, StatusCode.FailedPrecondition, wrong);
            return;
        }
        Interlocked.Add(ref _wireBytes, message.CalculateSize());
        _pending[m] = message;
        _pendingCount++;
        CoordinatorPhase phase = _coordinator.Phase;
        int needed = phase switch
        {
            CoordinatorPhase.CollectingUploads => _expectedUploads,
            CoordinatorPhase.Admitting => _n,
            // At a round start the first step also waits for the households dropped in the round before (their rejoin).
            _ => _n - DroppedCount() + (_coordinator.AtRoundStart ? AwaitedRejoins() : 0),
        };
        if (_pendingCount == 1 && _keyStage == KeyStage.None && phase is CoordinatorPhase.CollectingPartialSums or CoordinatorPhase.CollectingProjectionInputs)
        {
            ArmStepDeadline(phase == CoordinatorPhase.CollectingPartialSums ? message.PartialSums.Step : _coordinator.Step, phase);
        }
        if (_pendingCount == needed)
        {
            DeliverPending();
        }
    }

    /// <summary>Dropped households the current round start still waits for.</summary>
    private int AwaitedRejoins()
    {
        int a = 0;
        for (int h = 0; h < _n; h++)
        {
            a += _awaitRejoin[h] && _coordinator.IsDropped(h) ? 1 : 0;
        }
        return a;
    }

    private int DroppedCount()
    {
        int d = 0;
        for (int h = 0; h < _n; h++)
        {
            d += _coordinator.IsDropped(h) ? 1 : 0;
        }
        return d;
    }

    /// <summary>Schedules the deadline of a step's phase (with <see cref="CoordinatorHostOptions.StepTimeout"/>).</summary>
    private void ArmStepDeadline(long step, CoordinatorPhase phase)
    {
        if (_options.StepTimeout is { } timeout)
        {
            _ = Task.Delay(timeout).ContinueWith(_ => _inbox.Writer.TryWrite(new Inbound(null, null, false, -1, TimeoutStep: step, TimeoutPhase: phase)), TaskScheduler.Default);
        }
    }

    /// <summary>
    /// A step phase's deadline: the held messages go in, the coordinator drops the missing households and goes on. Under
    /// masked sums a dropout in the partial-sums phase opens the recovery phase, whose deadline starts at once (the
    /// survivors were asked for their shares; one that does not answer is dropped in turn).
    /// </summary>
    private void OnStepTimeout(long step, CoordinatorPhase phase)
    {
        bool same = _coordinator.Phase == phase
            && (phase == CoordinatorPhase.CollectingPartialSums ? _coordinator.Step == step - 1 : _coordinator.Step == step);
        if (!same || _finished || (_pendingCount == 0 && phase != CoordinatorPhase.CollectingRecoveryShares))
        {
            return;
        }
        if (_coordinator.AtRoundStart && MemberReconnecting())
        {
            // A member whose connection broke is waited for under --rejoin-timeout, not dropped by the step deadline.
            ArmStepDeadline(step, phase);
            return;
        }
        _log.LogWarning("step {Step}: deadline passed in {Phase} with {Arrived} of {Expected} households", step, phase, _pendingCount, _n - DroppedCount());
        DeliverPending();
        if (!_finished && _coordinator.StepOpen && _coordinator.Phase == phase)
        {
            bool[] before = new bool[_n];
            lock (_gate)
            {
                for (int h = 0; h < _n; h++)
                {
                    before[h] = _coordinator.IsDropped(h);
                }
                _coordinator.CloseStep(this); // the next phase's replies arrive through the queue and get their own deadline
            }
            for (int h = 0; h < _n; h++)
            {
                if (!before[h] && _coordinator.IsDropped(h))
                {
                    NoticeDropped(h);
                }
            }
            if (_coordinator.Phase == CoordinatorPhase.CollectingRecoveryShares)
            {
                _log.LogWarning("step {Step}: asked the survivors for their shares of the dropped households' mask keys", _coordinator.Step);
                ArmStepDeadline(_coordinator.Step, CoordinatorPhase.CollectingRecoveryShares);
            }
            AfterDelivery();
        }
    }

    /// <summary>Whether a member (not dropped) lost its connection and is inside its --rejoin-timeout window to reconnect.</summary>
    private bool MemberReconnecting()
    {
        for (int h = 0; h < _n; h++)
        {
            if (_reconnecting[h] && _sessions[h] is null && !_coordinator.IsDropped(h))
            {
                return true;
            }
        }
        return false;
    }

    /// <summary>
    /// Household m was dropped at a step deadline: the next round start waits for its rejoin, and its session (if still
    /// open: a gateway that stalled rather than left) ends with ABORTED and the <see cref="DroppedTrailer"/> trailer, so
    /// that the household knows to come back with a rejoin request; it is sent nothing more until then.
    /// </summary>
    private void NoticeDropped(int m)
    {
        _awaitRejoin[m] = true;
        if (_sessions[m] is { } s)
        {
            s.FaultTrailers = new Metadata { { DroppedTrailer, FormattableString.Invariant($"{_coordinator.Round},{_coordinator.Step}") } };
            Reject(s, StatusCode.Aborted, $"household '{s.Id}' was dropped from round {_coordinator.Round} at the deadline of step {_coordinator.Step}; " +
                "it may rejoin at a round start with a rejoin request");
        }
    }

    /// <summary>A rejoin request of a household dropped at a step deadline: taken at a round start (now, or held until the next one).</summary>
    private void OnDroppedRejoin(HouseholdSession session, HouseholdMessage message)
    {
        int m = session.Index;
        if (_coordinator.Phase == CoordinatorPhase.Admitting || !_coordinator.IsDropped(m))
        {
            Reject(session, StatusCode.FailedPrecondition, $"household '{session.Id}' asks to rejoin but was not dropped at a step deadline");
            return;
        }
        if (_coordinator.SchemeMessages)
        {
            Reject(session, StatusCode.FailedPrecondition, $"household '{session.Id}' cannot rejoin a {_options.Run.Scheme} run over the hosts (its fresh keys would need a key agreement mid-run, which the hosts do not hold)");
            return;
        }
        if (_rejoinHeld[m] is not null)
        {
            Reject(session, StatusCode.FailedPrecondition, $"household '{session.Id}' sent a second rejoin request");
            return;
        }
        Interlocked.Add(ref _wireBytes, message.CalculateSize());
        if (_coordinator.AtRoundStart)
        {
            DeliverRejoin(m, message);
            SettleRoundStart();
            return;
        }
        _rejoinHeld[m] = message;
        _log.LogInformation("household {Index} ('{Id}') asks to rejoin during round {Round}; held until the next round start", m, session.Id, _coordinator.Round);
    }

    private void DeliverRejoin(int m, HouseholdMessage message)
    {
        try
        {
            lock (_gate)
            {
                _coordinator.Receive(message, this);
            }
        }
        catch (ProtocolException e)
        {
            if (_sessions[m] is { } s)
            {
                Reject(s, StatusCode.FailedPrecondition, e.Message);
            }
            return;
        }
        _awaitRejoin[m] = false;
        _log.LogInformation("household {Index} ('{Id}') rejoined at the start of round {Round} after a step dropout", m, _scenario.Households[m].Id, _coordinator.Round);
    }

    /// <summary>At a round start: the held rejoins go in (household order), then the checkpoint once no rejoin is awaited.</summary>
    private void SettleRoundStart()
    {
        if (!_coordinator.AtRoundStart)
        {
            return;
        }
        for (int h = 0; h < _n; h++)
        {
            if (_rejoinHeld[h] is { } held)
            {
                _rejoinHeld[h] = null;
                DeliverRejoin(h, held);
            }
        }
        bool last = _coordinator.Step == _totalSteps - 1;
        if (_checkpoint is not null && !last && _coordinator.Round > _checkpointRound && AwaitedRejoins() == 0)
        {
            lock (_gate)
            {
                WriteCheckpoint();
            }
        }
    }

    /// <summary>Why the message is not one the protocol expects from household m now, or null.</summary>
    private string? Expected(int m, HouseholdMessage message)
    {
        if (_pending[m] is not null)
        {
            return $"household {m} sent a second {message.BodyCase} in the same phase (replayed or out of order)";
        }
        CoordinatorPhase phase = _coordinator.Phase;
        int round = _coordinator.Round;
        long next = _coordinator.Step + 1;
        if (phase != CoordinatorPhase.Admitting && _coordinator.IsDropped(m))
        {
            return $"household {m} was dropped from round {round} after missing a step's deadline";
        }
        if (_keyStage != KeyStage.None)
        {
            HouseholdMessage.BodyOneofCase want = _keyStage == KeyStage.PublicKeys ? HouseholdMessage.BodyOneofCase.MaskedKeys : HouseholdMessage.BodyOneofCase.KeyShares;
            return message.BodyCase == want ? null : $"{message.BodyCase} from household {m} while the masked-sums key agreement waits for {want}";
        }
        return message.BodyCase switch
        {
            HouseholdMessage.BodyOneofCase.Join when phase == CoordinatorPhase.Admitting => null,
            HouseholdMessage.BodyOneofCase.PartialSums when phase == CoordinatorPhase.CollectingPartialSums =>
                message.PartialSums.Round == round && message.PartialSums.Step == next ? null
                    : $"partial sums from household {m} for round {message.PartialSums.Round} step {message.PartialSums.Step}; round {round} step {next} is open",
            HouseholdMessage.BodyOneofCase.ProjectionInputs when phase == CoordinatorPhase.CollectingProjectionInputs =>
                message.ProjectionInputs.Round == round && message.ProjectionInputs.Step == _coordinator.Step ? null
                    : $"projection inputs from household {m} for round {message.ProjectionInputs.Round} step {message.ProjectionInputs.Step}; round {round} step {_coordinator.Step} is open",
            HouseholdMessage.BodyOneofCase.RecoveryShares when phase == CoordinatorPhase.CollectingRecoveryShares =>
                message.RecoveryShares.Round == round && message.RecoveryShares.Step == _coordinator.Step ? null
                    : $"recovery shares from household {m} for round {message.RecoveryShares.Round} step {message.RecoveryShares.Step}; round {round} step {_coordinator.Step} is recovering",
            HouseholdMessage.BodyOneofCase.Upload when phase == CoordinatorPhase.CollectingUploads =>
                message.Upload.Round != round ? $"upload from household {m} for round {message.Upload.Round}; round {round} is collecting"
                    : !_selected[m] ? $"household {m} uploaded without being called in round {round}" : null,
            _ => $"{message.BodyCase} from household {m} while the coordinator is {phase}",
        };
    }

    private void DeliverPending()
    {
        var batch = new List<HouseholdMessage>(_pendingCount);
        for (int h = 0; h < _n; h++)
        {
            if (_pending[h] is { } p)
            {
                batch.Add(p);
                _pending[h] = null;
            }
        }
        _pendingCount = 0;
        CoordinatorPhase before = _coordinator.Phase;
        bool admitting = before == CoordinatorPhase.Admitting;
        if (_coordinator.AtRoundStart)
        {
            // The round's first partial sums go in: the dropped households not back yet rejoin at a later round start.
            int awaited = AwaitedRejoins();
            Array.Clear(_awaitRejoin);
            if (awaited > 0)
            {
                _log.LogWarning("round {Round} starts without {Count} households dropped before; they may rejoin at a later round start", _coordinator.Round, awaited);
                SettleRoundStart();
            }
        }
        lock (_gate)
        {
            foreach (HouseholdMessage p in batch)
            {
                _coordinator.Receive(p, this);
            }
            if (admitting)
            {
                _watch.Restart(); // the run's clock starts when every household is admitted
            }
            _keyStage = _keyStage switch
            {
                KeyStage.None when admitting && _coordinator.SchemeMessages => KeyStage.PublicKeys,
                KeyStage.PublicKeys => KeyStage.KeyShares,
                _ => KeyStage.None,
            };
        }
        if (_coordinator.Phase == CoordinatorPhase.CollectingRecoveryShares && before != CoordinatorPhase.CollectingRecoveryShares)
        {
            // A household dropped earlier in the round: the survivors were asked for their shares; the answers get a deadline.
            ArmStepDeadline(_coordinator.Step, CoordinatorPhase.CollectingRecoveryShares);
        }
        AfterDelivery();
    }

    private void AfterDelivery()
    {
        if (_coordinator.Phase == CoordinatorPhase.CollectingUploads && _expectedUploads == 0)
        {
            lock (_gate)
            {
                _coordinator.CloseRound(this);
            }
        }
        SettleRoundStart();
        bool last = _coordinator.Step == _totalSteps - 1;
        if (last && _coordinator.Phase == CoordinatorPhase.CollectingPartialSums)
        {
            lock (_gate)
            {
                _coordinator.Finish();
                _writer?.Dispose();
                _watch.Stop();
                _finished = true;
            }
            _log.LogInformation("run finished: {Steps} steps, {Rounds} rounds in {Seconds:0.00} s", _totalSteps,
                _coordinator.AggregatedRounds + _coordinator.FailedRounds, _watch.Elapsed.TotalSeconds);
            _done.TrySetResult(Outcome(true, null));
        }
    }

    private void OnTimeout(int round)
    {
        if (_coordinator.Phase != CoordinatorPhase.CollectingUploads || _coordinator.Round != round)
        {
            return;
        }
        _log.LogWarning("round {Round}: upload deadline passed with {Arrived} of {Expected} uploads", round, _pendingCount, _expectedUploads);
        _expectedUploads = _pendingCount;
        if (_pendingCount > 0)
        {
            DeliverPending();
        }
        if (_coordinator.Phase == CoordinatorPhase.CollectingUploads && _coordinator.Round == round)
        {
            lock (_gate)
            {
                _coordinator.CloseRound(this);
            }
            AfterDelivery();
        }
    }

    private void OnClosed(HouseholdSession session)
    {
        lock (_gate)
        {
            if (_sessions[session.Index] == session)
            {
                _sessions[session.Index] = null;
                _connected--;
            }
        }
        session.Outgoing.Writer.TryComplete();
        if (_finished || _sessions[session.Index] is not null)
        {
            return;
        }
        int m = session.Index;
        if (_rejoinHeld[m] is not null)
        {
            _rejoinHeld[m] = null; // its rejoin went with the session
        }
        if (_coordinator.Phase != CoordinatorPhase.Admitting && _coordinator.IsDropped(m))
        {
            _log.LogInformation("household {Index} ('{Id}'), dropped at a step deadline, has no session now; it may rejoin at a round start", m, session.Id);
            return;
        }
        if (_coordinator.SchemeMessages && _coordinator.Phase != CoordinatorPhase.Admitting)
        {
            // Its private keys and the shares it held went with its session: it cannot come back over the hosts. With a
            // step deadline the coordinator drops it and recovers the steps' sums from the survivors' shares.
            if (_options.StepTimeout is not null && _keyStage == KeyStage.None)
            {
                _log.LogWarning("household {Index} ('{Id}') left in round {Round} ({Phase}); under {Scheme} it cannot rejoin, the step deadline will drop it",
                    m, session.Id, _coordinator.Round, _coordinator.Phase, _options.Run.Scheme);
                return;
            }
            string why = $"household '{session.Id}' left {(_keyStage != KeyStage.None ? "during the masked-sums key agreement" : $"in round {_coordinator.Round} ({_coordinator.Phase})")}; " +
                $"under {_options.Run.Scheme} a household whose session broke cannot rejoin (its keys go with it){(_keyStage == KeyStage.None ? "; run with --step-timeout to drop it and recover the sums" : "")}";
            _log.LogError("{Why}", why);
            _done.TrySetResult(Outcome(false, why));
            return;
        }
        if (_coordinator.Phase == CoordinatorPhase.CollectingUploads || _coordinator.AtRoundStart)
        {
            // Between rounds the household can come back: a message it left pending at this round start is dropped (it
            // resends it after rejoining); an upload it left pending still counts.
            if (_coordinator.Phase != CoordinatorPhase.CollectingUploads && _pending[m] is not null)
            {
                _pending[m] = null;
                _pendingCount--;
            }
            _log.LogWarning("household {Index} ('{Id}') lost its connection in round {Round} ({Phase}); waiting up to {Seconds:0} s for it to rejoin at a round start",
                m, session.Id, _coordinator.Round, _coordinator.Phase, _options.RejoinTimeout.TotalSeconds);
            lock (_gate)
            {
                _reconnecting[m] = _sessions[m] is null;
            }
            _ = Task.Delay(_options.RejoinTimeout).ContinueWith(_ => _inbox.Writer.TryWrite(new Inbound(session, null, false, -1, m)), TaskScheduler.Default);
            return;
        }
        if (_options.StepTimeout is not null && _coordinator.Phase != CoordinatorPhase.Admitting)
        {
            // Its step messages will miss their deadline; the coordinator drops it and goes on above the quorum.
            _log.LogWarning("household {Index} ('{Id}') left mid-step; the step deadline will drop it", m, session.Id);
            return;
        }
        _log.LogError("household {Index} ('{Id}') left in the middle of step {Step}", m, session.Id, _coordinator.Step);
        _done.TrySetResult(Outcome(false, $"household '{session.Id}' left in the middle of step {_coordinator.Step}"));
    }

    private void OnRejoinDeadline(int m, HouseholdSession lost)
    {
        lock (_gate)
        {
            if (_finished || _sessions[m] is not null || _coordinator.IsDropped(m))
            {
                return; // back, or dropped at a step deadline meanwhile (it may rejoin at a round start)
            }
        }
        if (_options.StepTimeout is not null)
        {
            // With a step deadline the run goes on without it: no longer waited for, the deadline drops it for the round.
            _log.LogWarning("household {Index} ('{Id}') did not rejoin within {Seconds:0} s; the step deadline drops it", m, lost.Id, _options.RejoinTimeout.TotalSeconds);
            lock (_gate)
            {
                _reconnecting[m] = false;
            }
            return;
        }
        _log.LogError("household {Index} ('{Id}') did not rejoin within {Seconds:0} s", m, lost.Id, _options.RejoinTimeout.TotalSeconds);
        _done.TrySetResult(Outcome(false, $"household '{lost.Id}' did not rejoin within {_options.RejoinTimeout.TotalSeconds:0} s"));
    }

    private void OnRejoin(HouseholdSession session, HouseholdMessage join)
    {
        if (_coordinator.SchemeMessages)
        {
            Reject(session, StatusCode.FailedPrecondition, $"household '{session.Id}' cannot rejoin a {_options.Run.Scheme} run over the hosts (its keys and the shares it held are gone)");
            return;
        }
        if (_coordinator.IsDropped(session.Index))
        {
            Reject(session, StatusCode.FailedPrecondition, $"household '{session.Id}' was dropped at a step deadline and joins afresh; a dropped household comes back " +
                "with a rejoin request from the state it kept (a restarted household cannot rejoin a run that dropped it)");
            return;
        }
        if (!_coordinator.AtRoundStart)
        {
            // Mid-round: the household retries and comes in at the next round start.
            Reject(session, StatusCode.Unavailable, $"household '{session.Id}' rejoins during round {_coordinator.Round} ({_coordinator.Phase}); households rejoin at a round start, retry");
            return;
        }
        try
        {
            lock (_gate)
            {
                _coordinator.Rejoin(join, this);
            }
        }
        catch (ProtocolException e)
        {
            Reject(session, StatusCode.FailedPrecondition, e.Message);
            return;
        }
        _log.LogInformation("household {Index} ('{Id}') rejoined at the start of round {Round}", session.Index, session.Id, _coordinator.Round);
    }

    private void Reject(HouseholdSession session, StatusCode code, string detail)
    {
        _log.LogWarning("rejected message ({Code}): {Detail}", code, detail);
        session.Fault.TrySetResult(new Status(code, detail));
    }

    /// <inheritdoc />
    void ICoordinatorOutbox.Send(CoordinatorMessage message)
    {
        // The state machine reuses its message objects: each recipient gets its own copy now.
        CoordinatorMessage copy = message.Clone();
        int size = copy.CalculateSize();
        if (copy.BodyCase == CoordinatorMessage.BodyOneofCase.Training)
        {
            if (copy.Training.Round == _coordinator.Round && copy.Training.Round != _trainingRound)
            {
                _trainingRound = copy.Training.Round;
                Array.Clear(_selected);
                _expectedUploads = 0;
                int round = copy.Training.Round;
                _ = Task.Delay(_options.RoundTimeout).ContinueWith(_ => _inbox.Writer.TryWrite(new Inbound(null, null, false, round)), TaskScheduler.Default);
            }
            if (copy.Training.Selected)
            {
                _selected[copy.HouseholdIndex] = true;
                _expectedUploads++;
            }
        }
        if (copy.HouseholdIndex == -1)
        {
            foreach (HouseholdSession? s in _sessions)
            {
                // A household dropped at a step deadline is sent nothing until it rejoins (as the in-process runner's offline households).
                if (s is not null && !_coordinator.IsDropped(s.Index))
                {
                    Interlocked.Add(ref _wireBytes, size);
                    s.Outgoing.Writer.TryWrite(copy);
                }
            }
        }
        else if (_sessions[copy.HouseholdIndex] is { } s && !_coordinator.IsDropped(copy.HouseholdIndex))
        {
            Interlocked.Add(ref _wireBytes, size);
            s.Outgoing.Writer.TryWrite(copy);
        }
    }

    private CoordinatorOutcome Outcome(bool ok, string? error) => new(ok, error, _coordinator.AggregatedRounds + _coordinator.FailedRounds,
        _coordinator.AggregatedRounds, _coordinator.FailedRounds, Math.Max(0, _coordinator.Step + 1), _n,
        ok ? Convert.ToHexStringLower(RunHashes.Model(_coordinator.Actor.Parameters, _coordinator.Critic.Parameters)) : "",
        _earlierSeconds + _watch.Elapsed.TotalSeconds, Interlocked.Read(ref _wireBytes));

    /// <inheritdoc />
    public void Dispose() => _writer?.Dispose();
}

/// <summary>How a hosted run ended, as the coordinator saw it.</summary>
/// <param name="Ok">Whether every step ran.</param>
/// <param name="Error">Why not, or null.</param>
/// <param name="Rounds">Rounds closed.</param>
/// <param name="AggregatedRounds">Rounds aggregated.</param>
/// <param name="FailedRounds">Rounds whose quorum failed.</param>
/// <param name="Steps">Decision steps done.</param>
/// <param name="Households">Households on the roster.</param>
/// <param name="ModelSha256">Hex SHA-256 of the final model (<see cref="RunHashes.Model"/>), empty when not ok.</param>
/// <param name="RunSeconds">Seconds from the admission of every household to the end of the last step.</param>
/// <param name="WireBytes">Protobuf bytes of the envelopes both ways, per household (a broadcast once per recipient).</param>
public sealed record CoordinatorOutcome(bool Ok, string? Error, int Rounds, int AggregatedRounds, int FailedRounds, long Steps, int Households,
    string ModelSha256, double RunSeconds, long WireBytes)
{
    /// <summary>Decision steps per second of wall time.</summary>
    public double StepsPerSecond => RunSeconds > 0 ? Steps / RunSeconds : 0;

    /// <summary>Wire bytes per household per decision step.</summary>
    public double BytesPerHouseholdPerStep => WireBytes / (double)(Households * Math.Max(1, Steps));
}
