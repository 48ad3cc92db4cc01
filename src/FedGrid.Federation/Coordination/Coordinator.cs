using FedGrid.Federation.Protocol;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Projection;
using FedGrid.Learning.Networks;
using FedGrid.Learning.Randomness;

namespace FedGrid.Federation.Coordination;

/// <summary>Where the coordinator's protocol machine stands.</summary>
public enum CoordinatorPhase
{
    /// <summary>Waiting for every household of the roster to join.</summary>
    Admitting,
    /// <summary>Collecting the current step's partial sums.</summary>
    CollectingPartialSums,
    /// <summary>Collecting the current step's projection inputs.</summary>
    CollectingProjectionInputs,
    /// <summary>Masked sums after a step's deadline: collecting the survivors' shares of the dropped households' mask keys.</summary>
    CollectingRecoveryShares,
    /// <summary>Collecting the round's uploads from the selected households.</summary>
    CollectingUploads,
    /// <summary>Masked uploads after the upload deadline: collecting the uploaders' shares of the missing participants' mask keys.</summary>
    CollectingUploadRecoveryShares,
    /// <summary>The run was ended with <see cref="Coordinator.Finish"/>.</summary>
    Finished,
}

/// <summary>Where the coordinator's messages go: a transport (gRPC host) or the in-process runner.</summary>
public interface ICoordinatorOutbox
{
    /// <summary>Delivers one message (recipient in <see cref="CoordinatorMessage.HouseholdIndex"/>, −1 for all). The message object may be reused after the call returns: serialise or copy it before.</summary>
    /// <param name="message">The message.</param>
    void Send(CoordinatorMessage message);
}

/// <summary>What the coordinator knows before the run: the feeder, the roster, fixed loads and the run's settings.</summary>
/// <param name="Feeder">The feeder (public).</param>
/// <param name="Roster">Household ids in block order (the operator's roster); index m = position.</param>
/// <param name="FeatureCount">Features per household state block.</param>
/// <param name="FixedLoads">Loads known at buses besides the households.</param>
/// <param name="Options">Run settings.</param>
/// <param name="Scheme">The scheme.</param>
/// <param name="ProjectionForm">The projection-input form.</param>
/// <param name="Projection">Projection settings (defaults when null).</param>
public sealed record CoordinatorSetup(Feeder Feeder, IReadOnlyList<string> Roster, int FeatureCount,
    IReadOnlyList<(string BusId, double Kw, double Kvar)> FixedLoads, FederationOptions Options, IFederationScheme Scheme,
    IProjectionInputsForm ProjectionForm, ProjectionOptions? Projection = null);

/// <summary>
/// The coordinator side of the protocol as an explicit state machine (<see cref="Phase"/>): admission, then per decision
/// step partial sums → sums replies → projection inputs → projection → final setpoints, and at each round's end training
/// calls to a seeded selection → uploads → aggregation (quorum checked) → broadcast. Every message received and sent,
/// and every decision (selection, aggregation, failed quorum, dropouts), goes to the transcript in order. A message that
/// does not fit throws <see cref="ProtocolException"/> after being recorded, and leaves the state unchanged.
/// <para>
/// Dropouts. Round level: a selected household whose upload misses the deadline (<see cref="CloseRound"/>) is recorded
/// and the round aggregates above the quorum. Step level: when a step's deadline passes (<see cref="CloseStep"/>), the
/// households whose partial sums, projection inputs or (masked sums) recovery shares have not arrived are dropped for
/// the rest of the round: recorded (<see cref="EventKind.StepDropout"/>), sent nothing more, not called to train, and
/// the others' sums and the projection go on without them. A dropped household can come back at the next round's start
/// (<see cref="RejoinRequest"/>, recorded as <see cref="EventKind.Rejoined"/>).
/// </para>
/// <para>
/// What the projection assumes about a dropped household's physical load: it holds the household fixed at the desired
/// (largest) flexible power and the base load it last reported (household form) — an offline gateway no longer
/// curtails, so its appliance is taken to run as its resident wants, and the upper end of its last box is the
/// conservative choice the coordinator can make from what it knows. It is an assumption, not a measurement: base load
/// can rise after the last report, and before a household's first report the coordinator knows nothing of it (0 kW is
/// assumed). The exact AC check judges the projected point under the assumption only; the operator's own meters remain
/// the safeguard. FedGrid is a simulation: any field use must follow the utility's rules and be reviewed by licensed
/// engineers (DESIGN.md §8).
/// </para>
/// </summary>
public sealed class Coordinator
{
    private readonly CoordinatorSetup _setup;
    private readonly ITranscriptSink _transcript;
    private readonly int _m;
    private readonly DenseNetwork _actor, _critic;
    private readonly ICoordinatorSchemeSide _scheme;
    private readonly RegisteredHousehold?[] _registered;
    private readonly bool[] _stepSeen, _projectionSeen, _selected, _dropped, _recoverySeen;
    private readonly ICoordinatorSchemeMessages? _schemeMessages;
    private readonly IMaskedUploads? _maskedUploads;
    private readonly Action<CoordinatorMessage> _schemeSend;
    private ICoordinatorOutbox? _schemeOutbox;
    private int _droppedCount, _recoveryCount, _recoveryExpected;
    private bool _recoveryAsked;
    private readonly ParameterUpload?[] _uploads;
    private readonly Dictionary<string, int> _rosterIndex;
    private readonly CoordinatorMessage _message = new();
    private readonly SumsReply[] _sums;
    private readonly float[] _actorShared, _criticShared;
    private readonly int _stepsPerRound;
    private ICoordinatorProjectionSide? _projection;
    private int _joined, _stepCount, _projectionCount, _selectedCount, _uploadCount, _round;
    private long _step = -1;

    /// <summary>Creates the coordinator with its seeded initial model.</summary>
    /// <param name="setup">What it knows.</param>
    /// <param name="transcript">Where it records (e.g. a <see cref="TranscriptWriter"/>).</param>
    public Coordinator(CoordinatorSetup setup, ITranscriptSink transcript)
    {
        ArgumentNullException.ThrowIfNull(setup);
        ArgumentNullException.ThrowIfNull(transcript);
        _setup = setup;
        _transcript = transcript;
        _m = setup.Roster.Count;
        setup.Options.Validate(_m);
        _stepsPerRound = setup.Options.StepsPerRound;
        var learning = setup.Options.Learning;
        (ActorShape, CriticShape) = Shapes(_m, setup.FeatureCount, learning);
        _actor = new DenseNetwork(ActorShape);
        _critic = new DenseNetwork(CriticShape);
        _actor.Initialise(LearningRandom.DeriveSeed(learning.Seed, 1), learning.InitialOutputScale);
        _critic.Initialise(LearningRandom.DeriveSeed(learning.Seed, 2), learning.InitialOutputScale);
        if (!setup.Scheme.ColumnsCrossWire)
        {
            // The coordinator never learns the households' columns: it holds none.
            for (int m = 0; m < _m; m++)
            {
                var (o, n) = _actor.FirstLayerBlockRange(m);
                _actor.Parameters.Slice(o, n).Clear();
                (o, n) = _critic.FirstLayerBlockRange(m);
                _critic.Parameters.Slice(o, n).Clear();
            }
        }
        _scheme = setup.Scheme.CreateCoordinatorSide(_m, ActorShape.FirstLayerSize, CriticShape.FirstLayerSize);
        _schemeMessages = _scheme as ICoordinatorSchemeMessages;
        _maskedUploads = _scheme.MaskedUploads;
        _maskedUploads?.Configure(UploadLayout.Of(_actor, _m, ActorShape.OutputSize / _m), UploadLayout.Of(_critic, _m, CriticShape.OutputSize / _m));
        _schemeSend = m => Send(_schemeOutbox!, m, -1);
        _registered = new RegisteredHousehold?[_m];
        _dropped = new bool[_m];
        _recoverySeen = new bool[_m];
        _stepSeen = new bool[_m];
        _projectionSeen = new bool[_m];
        _selected = new bool[_m];
        _uploads = new ParameterUpload?[_m];
        _rosterIndex = new Dictionary<string, int>(StringComparer.Ordinal);
        for (int i = 0; i < _m; i++)
        {
            if (!_rosterIndex.TryAdd(setup.Roster[i], i))
            {
                throw new ArgumentException($"household '{setup.Roster[i]}' appears twice in the roster", nameof(setup));
            }
        }
        _sums = new SumsReply[_m];
        for (int i = 0; i < _m; i++)
        {
            _sums[i] = new SumsReply();
        }
        _actorShared = new float[_actor.SharedRange().Length];
        _criticShared = new float[_critic.SharedRange().Length];
    }

    /// <summary>The actor and critic shapes of a run: every household's block of <paramref name="features"/>, the hidden sizes of <paramref name="learning"/>, one (mean, log-std) head per household for the actor and one value per household for the critic.</summary>
    /// <param name="households">M.</param>
    /// <param name="features">Features per block.</param>
    /// <param name="learning">Learning settings.</param>
    /// <returns>The shapes.</returns>
    public static (NetworkShape Actor, NetworkShape Critic) Shapes(int households, int features, Learning.ActorCritic.ActorCriticOptions learning)
    {
        ArgumentNullException.ThrowIfNull(learning);
        return (NetworkShape.Uniform(households, features, learning.HiddenSizes, 2 * households, learning.HiddenActivation),
            NetworkShape.Uniform(households, features, learning.HiddenSizes, households, learning.HiddenActivation));
    }

    /// <summary>The machine's phase.</summary>
    public CoordinatorPhase Phase { get; private set; } = CoordinatorPhase.Admitting;

    /// <summary>The current round.</summary>
    public int Round => _round;

    /// <summary>The current (or last) decision step.</summary>
    public long Step => _step;

    /// <summary>Shape of the actor.</summary>
    public NetworkShape ActorShape { get; }

    /// <summary>Shape of the critic.</summary>
    public NetworkShape CriticShape { get; }

    /// <summary>The coordinator's copy of the actor: shared parameters always; first-layer columns only when the scheme sends them (zero otherwise).</summary>
    public DenseNetwork Actor => _actor;

    /// <summary>The coordinator's copy of the critic (same rule).</summary>
    public DenseNetwork Critic => _critic;

    /// <summary>Rounds aggregated so far.</summary>
    public int AggregatedRounds { get; private set; }

    /// <summary>Rounds whose quorum failed.</summary>
    public int FailedRounds { get; private set; }

    /// <summary>The last projection's result (null before the first).</summary>
    public ProjectionResult? LastProjection { get; private set; }

    /// <summary>Projections by outcome so far, indexed by <see cref="ProjectionStatus"/>.</summary>
    public int[] ProjectionOutcomes { get; } = new int[5];

    /// <summary>Whether a decision step is open: some of its messages arrived and others are awaited (<see cref="CloseStep"/> applies).</summary>
    public bool StepOpen => Phase is CoordinatorPhase.CollectingProjectionInputs or CoordinatorPhase.CollectingRecoveryShares
        || (Phase == CoordinatorPhase.CollectingPartialSums && _stepCount > 0);

    /// <summary>Whether the scheme masks the uploads (the coordinator sees only their sum).</summary>
    public bool MasksUploads => _maskedUploads is not null;

    /// <summary>Whether household m is dropped (out of the current round, until it rejoins).</summary>
    /// <param name="household">m.</param>
    /// <returns>True when dropped.</returns>
    public bool IsDropped(int household) => _dropped[household];

    /// <summary>The count of dropped households the machine keeps (its quorum checks read it); the tests check it against <see cref="IsDropped"/>.</summary>
    internal int DroppedCount => _droppedCount;

    /// <summary>Whether the scheme's coordinator side exchanges messages of its own (<see cref="ICoordinatorSchemeMessages"/>: a key agreement after admission, e.g. masked sums), which a transport must carry.</summary>
    public bool SchemeMessages => _schemeMessages is not null;

    /// <summary>Households dropped out of a step so far (each time a household was dropped).</summary>
    public int StepDropouts { get; private set; }

    /// <summary>Dropped households admitted back so far.</summary>
    public int Rejoins { get; private set; }

    /// <summary>Handles one household message; replies go to <paramref name="outbox"/>.</summary>
    /// <param name="message">The message (read during the call, not kept).</param>
    /// <param name="outbox">Where replies go.</param>
    public void Receive(HouseholdMessage message, ICoordinatorOutbox outbox)
    {
        ArgumentNullException.ThrowIfNull(message);
        ArgumentNullException.ThrowIfNull(outbox);
        long step = message.BodyCase switch
        {
            HouseholdMessage.BodyOneofCase.PartialSums => message.PartialSums.Step,
            HouseholdMessage.BodyOneofCase.ProjectionInputs => message.ProjectionInputs.Step,
            HouseholdMessage.BodyOneofCase.BusShares => message.BusShares.Step,
            HouseholdMessage.BodyOneofCase.RecoveryShares => message.RecoveryShares.Step,
            _ => -1,
        };
        _transcript.Received(_round, step, message);
        switch (message.BodyCase)
        {
            case HouseholdMessage.BodyOneofCase.Join:
                OnJoin(message.Join, outbox);
                break;
            case HouseholdMessage.BodyOneofCase.Rejoin:
                OnRejoin(Sender(message), message.Rejoin, outbox);
                break;
            case HouseholdMessage.BodyOneofCase.RecoveryShares:
                OnRecoveryShares(Active(message), message.RecoveryShares, outbox);
                break;
            case HouseholdMessage.BodyOneofCase.MaskedKeys:
            case HouseholdMessage.BodyOneofCase.KeyShares:
                OnSchemeMessage(Sender(message), message, outbox);
                break;
            case HouseholdMessage.BodyOneofCase.PartialSums:
                OnPartialSums(Active(message), message.PartialSums, outbox);
                break;
            case HouseholdMessage.BodyOneofCase.Upload:
                OnUpload(Sender(message), message.Upload, outbox);
                break;
            default:
                OnProjection(Active(message), message, outbox);
                break;
        }
    }

    /// <summary>
    /// The current step's deadline passed (mirrors <see cref="CloseRound"/> for the round's uploads): the households whose
    /// partial sums, projection inputs or (masked sums) recovery shares have not arrived are dropped for the rest of the
    /// round and recorded (<see cref="EventKind.StepDropout"/>); the step goes on without them. Under masked sums a
    /// dropout in the partial-sums phase first asks the survivors for their shares of the dropped households' mask keys
    /// (phase <see cref="CoordinatorPhase.CollectingRecoveryShares"/>; call again when that deadline passes); the sum is
    /// recovered at or above the threshold, or the step is abandoned and recorded (never mis-summed).
    /// </summary>
    /// <param name="outbox">Where replies go.</param>
    /// <exception cref="ProtocolException">No step is open (<see cref="StepOpen"/> is false), or the projection form cannot project without a household.</exception>
    public void CloseStep(ICoordinatorOutbox outbox)
    {
        ArgumentNullException.ThrowIfNull(outbox);
        if (!StepOpen)
        {
            throw new ProtocolException($"no decision step is open (phase {Phase}, last step {_step})");
        }
        if (!_projection!.SupportsDropouts)
        {
            throw new ProtocolException($"the '{_setup.ProjectionForm.Name}' projection form cannot project step {_step} without the missing households");
        }
        switch (Phase)
        {
            case CoordinatorPhase.CollectingPartialSums:
                DropMissing(_stepSeen, "partial sums");
                FinishSums(outbox);
                break;
            case CoordinatorPhase.CollectingRecoveryShares:
                DropMissing(_recoverySeen, "recovery shares", onlyAmong: _stepSeen);
                FinishSums(outbox);
                break;
            default:
                DropMissing(_projectionSeen, "projection inputs");
                FinishProjection(outbox);
                break;
        }
    }

    /// <summary>
    /// The round's upload deadline passed: aggregates what arrived when at least the quorum did, otherwise records the
    /// failed round and broadcasts the unchanged model; missing selected households are recorded as dropouts.
    /// </summary>
    /// <param name="outbox">Where the broadcast goes.</param>
    public void CloseRound(ICoordinatorOutbox outbox)
    {
        ArgumentNullException.ThrowIfNull(outbox);
        if (Phase == CoordinatorPhase.CollectingUploadRecoveryShares)
        {
            // The recovery deadline: uploaders that did not reveal their shares are out too (their uploads stay in the sum).
            var silent = new List<int>();
            for (int h = 0; h < _m; h++)
            {
                if (_uploads[h] is not null && !_recoverySeen[h])
                {
                    silent.Add(h);
                }
            }
            DropFromRound(silent, $"{silent.Count} uploaders sent no recovery shares before the deadline of round {_round}; their uploads are in the round's sum; out until they rejoin with fresh keys");
            Aggregate(outbox);
            return;
        }
        if (Phase != CoordinatorPhase.CollectingUploads)
        {
            throw new ProtocolException($"no round is collecting uploads (phase {Phase})");
        }
        if (_maskedUploads is not null && _uploadCount > 0 && _uploadCount < _selectedCount)
        {
            var missing = new List<int>();
            for (int h = 0; h < _m; h++)
            {
                if (_selected[h] && _uploads[h] is null)
                {
                    missing.Add(h);
                }
            }
            // A missing participant's masks are in the others' uploads: it is out of the round and, once its key is
            // rebuilt, of the masks; it comes back with fresh keys.
            DropFromRound(missing, $"{missing.Count} participants sent no masked upload before the deadline of round {_round}; out until they rejoin with fresh keys");
            IReadOnlyList<int> needed = _maskedUploads.SharesNeeded(missing, _uploadCount);
            if (needed.Count > 0)
            {
                Array.Clear(_recoverySeen);
                _recoveryCount = 0;
                _recoveryExpected = _uploadCount;
                Phase = CoordinatorPhase.CollectingUploadRecoveryShares;
                for (int h = 0; h < _m; h++)
                {
                    if (_uploads[h] is not null)
                    {
                        var request = new RecoveryRequest { Round = _round, Step = -1 };
                        request.Dropped.AddRange(needed);
                        Send(outbox, new CoordinatorMessage { HouseholdIndex = h, RecoveryRequest = request }, -1);
                    }
                }
                return;
            }
        }
        Aggregate(outbox);
    }

    private void DropFromRound(List<int> households, string detail)
    {
        if (households.Count == 0)
        {
            return;
        }
        foreach (int h in households)
        {
            if (!_dropped[h])
            {
                _dropped[h] = true;
                _droppedCount++;
            }
        }
        Event(EventKind.StepDropout, households, detail);
    }

    /// <summary>Ends the run: records completion and flushes the transcript.</summary>
    public void Finish()
    {
        if (Phase == CoordinatorPhase.Finished)
        {
            return;
        }
        Event(EventKind.RunCompleted, [], $"{AggregatedRounds} rounds aggregated, {FailedRounds} failed");
        _transcript.Flush();
        Phase = CoordinatorPhase.Finished;
    }

    private int Sender(HouseholdMessage message)
    {
        int m = message.HouseholdIndex;
        if (m < 0 || m >= _m || _registered[m] is null)
        {
            throw new ProtocolException($"message from unknown household index {m}");
        }
        return m;
    }

    private int Active(HouseholdMessage message)
    {
        int m = Sender(message);
        if (_dropped[m])
        {
            throw new ProtocolException($"household {m} was dropped from round {_round} (it missed a step's deadline); it may rejoin at the next round's start");
        }
        return m;
    }

    private void DropMissing(bool[] seen, string what, bool[]? onlyAmong = null)
    {
        var missing = new List<int>();
        for (int h = 0; h < _m; h++)
        {
            if (!_dropped[h] && !seen[h] && (onlyAmong is null || onlyAmong[h]))
            {
                missing.Add(h);
            }
        }
        if (missing.Count == 0)
        {
            return;
        }
        foreach (int h in missing)
        {
            _dropped[h] = true;
        }
        _droppedCount += missing.Count;
        StepDropouts += missing.Count;
        string assumption = what == "recovery shares"
            ? "their partial sums are in this step's sum"
            : "the projection holds each at the desired power and base load it last reported";
        Event(EventKind.StepDropout, missing, $"{missing.Count} households sent no {what} before the deadline of step {_step}; out for the rest of round {_round}; {assumption}", _step);
    }

    private void OnRejoin(int m, RejoinRequest rejoin, ICoordinatorOutbox outbox)
    {
        if (!_dropped[m])
        {
            throw new ProtocolException($"household {m} asks to rejoin but was not dropped");
        }
        if (Phase != CoordinatorPhase.CollectingPartialSums || _stepCount != 0 || _step >= (long)_round * _stepsPerRound)
        {
            throw new ProtocolException($"household {m} asks to rejoin while round {_round} is under way (phase {Phase}); it may rejoin at the next round's start");
        }
        if (rejoin.LastRound >= _round || rejoin.LastRound < 0)
        {
            throw new ProtocolException($"household {m} last took part in round {rejoin.LastRound}; the coordinator is in round {_round}");
        }
        _dropped[m] = false;
        _droppedCount--;
        Rejoins++;
        Event(EventKind.Rejoined, [m], $"household {m} (last in round {rejoin.LastRound}) takes part again from round {_round}");
        var model = new ModelBroadcast { Round = _round, Scope = ParameterScope.Shared, Aggregated = false };
        Append(model.ActorParameters, _actor, -1);
        Append(model.CriticParameters, _critic, -1);
        Send(outbox, new CoordinatorMessage { HouseholdIndex = m, Model = model }, -1);
        _schemeMessages?.Rejoined(m, _round);
        _transcript.Flush();
    }

    private void OnSchemeMessage(int m, HouseholdMessage message, ICoordinatorOutbox outbox)
    {
        _schemeOutbox = outbox;
        if (_schemeMessages is null || !_schemeMessages.TryReceive(m, message, _dropped, _schemeSend))
        {
            throw new ProtocolException($"household {m} sent a {message.BodyCase} message, which scheme '{_setup.Scheme.Name}' does not take");
        }
    }

    private void OnRecoveryShares(int m, RecoveryShares shares, ICoordinatorOutbox outbox)
    {
        if (Phase == CoordinatorPhase.CollectingUploadRecoveryShares)
        {
            if (shares.Round != _round || shares.Step != -1)
            {
                throw new ProtocolException($"recovery shares from household {m} for round {shares.Round} step {shares.Step}; the masked uploads of round {_round} (step -1) are recovering");
            }
            if (_uploads[m] is null)
            {
                throw new ProtocolException($"household {m} sent recovery shares but no masked upload in round {_round}");
            }
            if (_recoverySeen[m])
            {
                throw new ProtocolException($"household {m} sent its recovery shares twice in round {_round}");
            }
            _maskedUploads!.AddShares(m, shares);
            _recoverySeen[m] = true;
            _recoveryCount++;
            if (_recoveryCount == _recoveryExpected)
            {
                Aggregate(outbox);
            }
            return;
        }
        if (Phase != CoordinatorPhase.CollectingRecoveryShares)
        {
            throw new ProtocolException($"recovery shares from household {m} in phase {Phase}");
        }
        if (shares.Round != _round || shares.Step != _step)
        {
            throw new ProtocolException($"recovery shares from household {m} for round {shares.Round} step {shares.Step}; step {_step} of round {_round} is recovering");
        }
        if (!_stepSeen[m])
        {
            throw new ProtocolException($"household {m} sent recovery shares but no partial sums in step {_step}");
        }
        if (_recoverySeen[m])
        {
            throw new ProtocolException($"household {m} sent its recovery shares twice in step {_step}");
        }
        _scheme.PartialSums.AddShares(m, shares);
        _recoverySeen[m] = true;
        _recoveryCount++;
        if (_recoveryCount == _recoveryExpected)
        {
            FinishSums(outbox);
        }
    }

    private void OnJoin(JoinRequest join, ICoordinatorOutbox outbox)
    {
        if (Phase != CoordinatorPhase.Admitting)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' joins after admission closed");
        }
        if (!_rosterIndex.TryGetValue(join.HouseholdId, out int m))
        {
            throw new ProtocolException($"household '{join.HouseholdId}' is not on the roster");
        }
        if (_registered[m] is not null)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' joined twice");
        }
        if (join.ProtocolVersion != 1)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' speaks protocol version {join.ProtocolVersion}; this coordinator speaks 1");
        }
        if (join.FeatureCount != _setup.FeatureCount)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' has {join.FeatureCount} features; the run uses {_setup.FeatureCount}");
        }
        if (!_setup.Feeder.TryGetIndex(join.BusId, out _))
        {
            throw new ProtocolException($"household '{join.HouseholdId}' names bus '{join.BusId}', not on feeder '{_setup.Feeder.Name}'");
        }
        if (!double.IsFinite(join.TanPhi) || join.TanPhi < 0)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' sends tan phi {join.TanPhi}");
        }
        _registered[m] = new RegisteredHousehold(m, join.HouseholdId, join.BusId, join.TanPhi,
            join.ProjectionPublicKey.IsEmpty ? null : join.ProjectionPublicKey.ToByteArray());
        _joined++;
        Send(outbox, new CoordinatorMessage { HouseholdIndex = m, Accepted = AcceptedFor(m) }, -1);
        if (_joined < _m)
        {
            return;
        }
        _projection = _setup.ProjectionForm.CreateCoordinatorSide(_setup.Feeder, _registered!, _setup.FixedLoads, _setup.Projection);
        for (int h = 0; h < _m; h++)
        {
            var setupMessage = new CoordinatorMessage();
            if (_projection.TryWriteSetup(h, setupMessage))
            {
                Send(outbox, setupMessage, -1);
            }
        }
        // The initial model: per household with its own columns (plain), or one broadcast of the shared part.
        if (_setup.Scheme.ColumnsCrossWire)
        {
            for (int h = 0; h < _m; h++)
            {
                var model = new ModelBroadcast { Round = 0, Scope = ParameterScope.OwnColumnsAndShared };
                Append(model.ActorParameters, _actor, h);
                Append(model.CriticParameters, _critic, h);
                Send(outbox, new CoordinatorMessage { HouseholdIndex = h, Model = model }, -1);
            }
        }
        else
        {
            var model = new ModelBroadcast { Round = 0, Scope = ParameterScope.Shared };
            Append(model.ActorParameters, _actor, -1);
            Append(model.CriticParameters, _critic, -1);
            Send(outbox, new CoordinatorMessage { HouseholdIndex = -1, Model = model }, -1);
        }
        _transcript.Flush();
        Phase = CoordinatorPhase.CollectingPartialSums;
    }

    private static void Append(Google.Protobuf.Collections.RepeatedField<float> target, DenseNetwork network, int household)
    {
        if (household >= 0)
        {
            var (o, n) = network.FirstLayerBlockRange(household);
            AddRange(target, network.Parameters.Slice(o, n));
        }
        var (so, sn) = network.SharedRange();
        AddRange(target, network.Parameters.Slice(so, sn));
    }

    private static void AddRange(Google.Protobuf.Collections.RepeatedField<float> target, ReadOnlySpan<float> values)
    {
        target.Capacity = Math.Max(target.Capacity, target.Count + values.Length);
        foreach (float v in values)
        {
            target.Add(v);
        }
    }

    private void OnPartialSums(int m, PartialSums sums, ICoordinatorOutbox outbox)
    {
        if (Phase != CoordinatorPhase.CollectingPartialSums)
        {
            throw new ProtocolException($"partial sums from household {m} in phase {Phase}");
        }
        if (sums.Round != _round || sums.Step / _stepsPerRound != _round)
        {
            throw new ProtocolException($"partial sums from household {m} for round {sums.Round} step {sums.Step}; the coordinator is in round {_round}");
        }
        if (_stepCount == 0)
        {
            if (sums.Step <= _step)
            {
                throw new ProtocolException($"partial sums from household {m} for step {sums.Step}, which is not after step {_step}");
            }
        }
        else if (sums.Step != _step)
        {
            throw new ProtocolException($"partial sums from household {m} for step {sums.Step}; step {_step} is open");
        }
        if (_stepSeen[m])
        {
            throw new ProtocolException($"household {m} sent its partial sums twice in step {_step}");
        }
        if (_stepCount == 0)
        {
            _scheme.PartialSums.Begin();
        }
        _scheme.PartialSums.Add(m, sums);
        if (_stepCount == 0)
        {
            _step = sums.Step;
        }
        _stepSeen[m] = true;
        _stepCount++;
        if (_stepCount < _m - _droppedCount)
        {
            return;
        }
        FinishSums(outbox);
    }

    /// <summary>Every expected household's partial sums arrived, or the deadline passed: recover if needed, then reply.</summary>
    private void FinishSums(ICoordinatorOutbox outbox)
    {
        IPartialSumsCombiner combiner = _scheme.PartialSums;
        if (_droppedCount > 0 && !_recoveryAsked)
        {
            var missing = new List<int>();
            for (int h = 0; h < _m; h++)
            {
                if (!_stepSeen[h])
                {
                    missing.Add(h);
                }
            }
            IReadOnlyList<int> needed = combiner.SharesNeeded(missing);
            if (needed.Count > 0)
            {
                _recoveryAsked = true;
                _recoveryCount = 0;
                _recoveryExpected = _stepCount;
                Array.Clear(_recoverySeen);
                Phase = CoordinatorPhase.CollectingRecoveryShares;
                for (int h = 0; h < _m; h++)
                {
                    if (_stepSeen[h])
                    {
                        var request = new RecoveryRequest { Round = _round, Step = _step };
                        request.Dropped.AddRange(needed);
                        Send(outbox, new CoordinatorMessage { HouseholdIndex = h, RecoveryRequest = request }, _step);
                    }
                }
                return;
            }
        }
        _recoveryAsked = false;
        SumsOutcome outcome = combiner.Close();
        if (outcome.Recovered.Count > 0)
        {
            Event(EventKind.SumRecovered, outcome.Recovered, outcome.Detail ?? "masks of dropped households removed", _step);
        }
        if (!outcome.HasTotal)
        {
            Event(EventKind.SumAbandoned, outcome.Unrecovered, outcome.Detail ?? "no total for the step", _step);
        }
        for (int h = 0; h < _m; h++)
        {
            if (!_stepSeen[h] || _dropped[h])
            {
                continue; // dropped: out of the round, sent nothing more
            }
            SumsReply reply = _sums[h];
            reply.Round = _round;
            reply.Step = _step;
            combiner.WriteReply(h, reply);
            _message.HouseholdIndex = h;
            _message.Sums = reply;
            Send(outbox, _message, _step);
        }
        Array.Clear(_stepSeen);
        _stepCount = 0;
        _projection!.Begin();
        Phase = CoordinatorPhase.CollectingProjectionInputs;
        if (_droppedCount == _m)
        {
            FinishProjection(outbox);
        }
    }

    private void OnProjection(int m, HouseholdMessage message, ICoordinatorOutbox outbox)
    {
        if (Phase != CoordinatorPhase.CollectingProjectionInputs)
        {
            throw new ProtocolException($"{message.BodyCase} from household {m} in phase {Phase}");
        }
        (int inRound, long inStep) = message.BodyCase switch
        {
            HouseholdMessage.BodyOneofCase.ProjectionInputs => (message.ProjectionInputs.Round, message.ProjectionInputs.Step),
            HouseholdMessage.BodyOneofCase.BusShares => (message.BusShares.Round, message.BusShares.Step),
            _ => (_round, _step),
        };
        if (inRound != _round || inStep != _step)
        {
            throw new ProtocolException($"projection inputs from household {m} for round {inRound} step {inStep}; step {_step} of round {_round} is open");
        }
        if (_projectionSeen[m])
        {
            throw new ProtocolException($"household {m} sent its projection inputs twice in step {_step}");
        }
        if (!_projection!.TryAdd(m, message))
        {
            throw new ProtocolException($"household {m} sent a {message.BodyCase} message, which the '{_setup.ProjectionForm.Name}' projection form does not take");
        }
        _projectionSeen[m] = true;
        _projectionCount++;
        if (_projectionCount < _m - _droppedCount)
        {
            return;
        }
        FinishProjection(outbox);
    }

    private void FinishProjection(ICoordinatorOutbox outbox)
    {
        ICoordinatorProjectionSide projection = _projection!;
        if (_droppedCount > 0)
        {
            for (int h = 0; h < _m; h++)
            {
                if (_dropped[h])
                {
                    projection.AddDropped(h);
                }
            }
        }
        ProjectionResult result = projection.Project();
        LastProjection = result;
        ProjectionOutcomes[(int)result.Status]++;
        for (int h = 0; h < _m; h++)
        {
            if (_dropped[h])
            {
                continue;
            }
            projection.WriteReply(h, _round, _step, _message);
            Send(outbox, _message, _step);
        }
        Array.Clear(_projectionSeen);
        _projectionCount = 0;
        if ((_step + 1) % _stepsPerRound != 0)
        {
            Phase = CoordinatorPhase.CollectingPartialSums;
            return;
        }
        SelectAndCall(outbox);
    }

    private void SelectAndCall(ICoordinatorOutbox outbox)
    {
        int count = _setup.Options.SelectedPerRound(_m);
        Array.Clear(_selected);
        var order = new int[_m];
        for (int i = 0; i < _m; i++)
        {
            order[i] = i;
        }
        var rng = new LearningRandom(LearningRandom.DeriveSeed(_setup.Options.Learning.Seed, 0x5E1EC7000UL + (ulong)_round));
        for (int i = 0; i < count; i++)
        {
            int j = i + rng.NextInt(_m - i);
            (order[i], order[j]) = (order[j], order[i]);
            _selected[order[i]] = true;
        }
        var chosen = new List<int>(count);
        int droppedChosen = 0;
        for (int i = 0; i < _m; i++)
        {
            if (_selected[i] && _dropped[i])
            {
                _selected[i] = false; // drawn, but out of the round: not called
                droppedChosen++;
            }
            if (_selected[i])
            {
                chosen.Add(i);
            }
        }
        Event(EventKind.RoundSelected, chosen, droppedChosen == 0
            ? $"{count} of {_m} households called to train"
            : $"{chosen.Count} of {_m} households called to train ({droppedChosen} more drawn but dropped from the round)");
        _selectedCount = chosen.Count;
        _uploadCount = 0;
        Array.Clear(_uploads);
        Phase = CoordinatorPhase.CollectingUploads;
        for (int h = 0; h < _m; h++)
        {
            if (!_dropped[h])
            {
                var call = new TrainingCall { Round = _round, Selected = _selected[h] };
                if (_maskedUploads is not null && _selected[h])
                {
                    call.Participants.AddRange(chosen);
                }
                Send(outbox, new CoordinatorMessage { HouseholdIndex = h, Training = call }, -1);
            }
        }
        if (_selectedCount == 0)
        {
            Aggregate(outbox);
        }
    }

    private void OnUpload(int m, ParameterUpload upload, ICoordinatorOutbox outbox)
    {
        if (Phase != CoordinatorPhase.CollectingUploads)
        {
            throw new ProtocolException($"upload from household {m} in phase {Phase}");
        }
        if (upload.Round != _round)
        {
            throw new ProtocolException($"upload from household {m} for round {upload.Round}; round {_round} is collecting");
        }
        if (!_selected[m])
        {
            throw new ProtocolException($"household {m} uploaded without being called in round {_round}");
        }
        if (_uploads[m] is not null)
        {
            throw new ProtocolException($"household {m} uploaded twice in round {_round}");
        }
        if (_maskedUploads is not null)
        {
            _maskedUploads.Check(m, upload);
            _uploads[m] = upload.Clone();
            _uploadCount++;
            if (_uploadCount == _selectedCount)
            {
                Aggregate(outbox);
            }
            return;
        }
        bool columnsUp = _setup.Scheme.ColumnsInUploads;
        ParameterScope expected = columnsUp ? ParameterScope.OwnColumnsAndShared : ParameterScope.Shared;
        int actorLength = _actorShared.Length + (columnsUp ? _actor.FirstLayerBlockRange(m).Length : 0);
        int criticLength = _criticShared.Length + (columnsUp ? _critic.FirstLayerBlockRange(m).Length : 0);
        if (upload.Scope != expected || upload.ActorParameters.Count != actorLength || upload.CriticParameters.Count != criticLength)
        {
            throw new ProtocolException($"upload from household {m}: scope {upload.Scope} with {upload.ActorParameters.Count} + {upload.CriticParameters.Count} parameters; expected {expected} with {actorLength} + {criticLength}");
        }
        if (upload.SampleCount < 0)
        {
            throw new ProtocolException($"upload from household {m} claims {upload.SampleCount} samples");
        }
        foreach (float v in upload.ActorParameters)
        {
            if (!float.IsFinite(v))
            {
                throw new ProtocolException($"upload from household {m} holds a non-finite actor parameter");
            }
        }
        foreach (float v in upload.CriticParameters)
        {
            if (!float.IsFinite(v))
            {
                throw new ProtocolException($"upload from household {m} holds a non-finite critic parameter");
            }
        }
        _uploads[m] = upload.Clone();
        _uploadCount++;
        if (_uploadCount == _selectedCount)
        {
            Aggregate(outbox);
        }
    }

    private void Aggregate(ICoordinatorOutbox outbox)
    {
        var received = new List<ReceivedUpload>(_uploadCount);
        var missing = new List<int>();
        long samples = 0;
        for (int h = 0; h < _m; h++)
        {
            if (_uploads[h] is { } u)
            {
                received.Add(new ReceivedUpload(h, u));
                samples += u.SampleCount;
            }
            else if (_selected[h])
            {
                missing.Add(h);
            }
        }
        if (missing.Count > 0)
        {
            Event(EventKind.Dropout, missing, $"{missing.Count} selected households sent no upload in round {_round}");
        }
        var contributors = received.Select(r => r.Household).ToList();
        bool summed = true;
        string? failure = null;
        if (_maskedUploads is not null && received.Count > 0)
        {
            // The coordinator sees only the sum: the averaged shared parameters and Σ n_k come out of it.
            _actor.Parameters.Slice(_actor.SharedRange().Offset).CopyTo(_actorShared);
            _critic.Parameters.Slice(_critic.SharedRange().Offset).CopyTo(_criticShared);
            MaskedUploadsOutcome masked = _maskedUploads.Aggregate(_round, received, _selected, _actorShared, _criticShared);
            samples = masked.Samples;
            summed = masked.Sums.HasTotal;
            if (masked.Sums.Recovered.Count > 0)
            {
                Event(EventKind.SumRecovered, masked.Sums.Recovered, masked.Sums.Detail ?? "masks of dropped participants removed");
            }
            if (!summed)
            {
                failure = masked.Sums.Detail ?? "no total of the masked uploads";
                Event(EventKind.SumAbandoned, masked.Sums.Unrecovered, failure);
            }
        }
        bool ok = summed && received.Count >= _setup.Options.MinQuorum && samples > 0;
        if (ok && _maskedUploads is not null)
        {
            _actorShared.CopyTo(_actor.Parameters.Slice(_actor.SharedRange().Offset));
            _criticShared.CopyTo(_critic.Parameters.Slice(_critic.SharedRange().Offset));
            AggregatedRounds++;
            Event(EventKind.RoundAggregated, contributors, $"{_setup.Scheme.Name}: the sum of {received.Count} masked uploads, {samples} samples");
        }
        else if (ok)
        {
            _scheme.AggregateUploads(received, _actorShared, _criticShared);
            _actorShared.CopyTo(_actor.Parameters.Slice(_actor.SharedRange().Offset));
            _criticShared.CopyTo(_critic.Parameters.Slice(_critic.SharedRange().Offset));
            // Parameters that one household alone trains (its output head; under plain also its first-layer columns)
            // take that household's uploaded value: the average over the households that train them.
            bool columns = _setup.Scheme.ColumnsInUploads;
            foreach (ReceivedUpload r in received)
            {
                CopyOwned(_actor, r.Household, r.Upload.ActorParameters, 2 * (ActorShape.OutputSize / (2 * _m)), columns);
                CopyOwned(_critic, r.Household, r.Upload.CriticParameters, CriticShape.OutputSize / _m, columns);
            }
            AggregatedRounds++;
            Event(EventKind.RoundAggregated, contributors, $"{_setup.Scheme.Name}: {received.Count} uploads, {samples} samples");
        }
        else
        {
            FailedRounds++;
            Event(EventKind.QuorumFailed, contributors, failure is not null
                ? $"{received.Count} masked uploads without a total; model kept"
                : $"{received.Count} uploads ({samples} samples) below the quorum of {_setup.Options.MinQuorum}; model kept");
        }
        int next = _round + 1;
        var model = new ModelBroadcast { Round = next, Scope = ParameterScope.Shared, Aggregated = ok };
        if (ok)
        {
            model.Contributors.AddRange(contributors);
        }
        Append(model.ActorParameters, _actor, -1);
        Append(model.CriticParameters, _critic, -1);
        Send(outbox, new CoordinatorMessage { HouseholdIndex = -1, Model = model }, -1);
        _round = next;
        Array.Clear(_uploads);
        Phase = CoordinatorPhase.CollectingPartialSums;
        if (_schemeMessages is not null)
        {
            _schemeOutbox = outbox;
            _schemeMessages.BeginRound(next, _dropped, _schemeSend);
        }
        _transcript.Flush();
    }

    /// <summary>
    /// The ranges of the flat parameter vector that household m alone trains: its first-layer columns W_m, and its rows of
    /// the output layer (<paramref name="outputsPerHousehold"/> outputs: 2k for the actor, 1 for the critic) with their biases.
    /// FedAvg over the households that train a parameter gives these the household's own value.
    /// </summary>
    /// <param name="network">The network.</param>
    /// <param name="household">m.</param>
    /// <param name="outputsPerHousehold">Outputs of household m's head.</param>
    /// <returns>(offset, length) ranges, first-layer columns first.</returns>
    public static (int Offset, int Length)[] OwnedRanges(DenseNetwork network, int household, int outputsPerHousehold)
    {
        ArgumentNullException.ThrowIfNull(network);
        int last = network.LayerCount - 1, inputs = network.LayerInputSize(last);
        return
        [
            network.FirstLayerBlockRange(household),
            (network.WeightOffset(last) + household * outputsPerHousehold * inputs, outputsPerHousehold * inputs),
            (network.BiasOffset(last) + household * outputsPerHousehold, outputsPerHousehold),
        ];
    }

    private static void CopyOwned(DenseNetwork network, int household, Google.Protobuf.Collections.RepeatedField<float> upload, int outputs, bool columns)
    {
        var ranges = OwnedRanges(network, household, outputs);
        int sharedOffset = network.SharedRange().Offset;
        int columnLength = ranges[0].Length;
        int head = columns ? columnLength : 0; // where the shared part starts inside the upload
        Span<float> p = network.Parameters;
        if (columns)
        {
            for (int i = 0; i < columnLength; i++)
            {
                p[ranges[0].Offset + i] = upload[i];
            }
        }
        for (int r = 1; r < ranges.Length; r++)
        {
            var (o, n) = ranges[r];
            for (int i = 0; i < n; i++)
            {
                p[o + i] = upload[head + (o - sharedOffset) + i];
            }
        }
    }

    private void Event(EventKind kind, IReadOnlyList<int> households, string detail, long step = -1)
    {
        var e = new CoordinatorEvent { Kind = kind, Detail = detail };
        e.Households.AddRange(households);
        _transcript.Event(_round, step, e);
    }

    private void Send(ICoordinatorOutbox outbox, CoordinatorMessage message, long step)
    {
        _transcript.Sent(_round, step, message);
        outbox.Send(message);
    }


    // ---- Round-end checkpoint and rejoin (additive region; round starts only, not on the decision-step path) ----

    /// <summary>Version 2 adds the households dropped at a step deadline (and the dropout and rejoin counters) and, in the
    /// projection side's state, each household's last report; version 1 snapshots are refused (they did not record them).</summary>
    private const int SnapshotVersion = 2;

    /// <summary>Whether the machine stands at a round start: the previous round closed, no step of this round begun (the only point where it can be checkpointed or a household can rejoin).</summary>
    public bool AtRoundStart => Phase == CoordinatorPhase.CollectingPartialSums && _stepCount == 0 && _projectionCount == 0 && (_step + 1) % _stepsPerRound == 0;

    private JoinAccepted AcceptedFor(int m) => new()
    {
        HouseholdIndex = m,
        HouseholdCount = _m,
        Scheme = _setup.Scheme.Name,
        ActorShape = ShapeCodec.ToSpec(ActorShape),
        CriticShape = ShapeCodec.ToSpec(CriticShape),
        StepsPerRound = _stepsPerRound,
        ProjectionInputs = _setup.ProjectionForm.Name,
    };

    /// <summary>
    /// Writes everything the machine needs to continue from this round start: round, last step, counters, the registered
    /// households, the model, the projection side's state (the solver's warm start, the last reports a dropped household
    /// is stood in with) and which households a step deadline dropped (they stay out until they rejoin). The selection
    /// needs no state (it is drawn from the seed and the round); the clear schemes' coordinator side keeps none between
    /// rounds. A masked-sums recovery lives inside one step and never spans a round start.
    /// </summary>
    /// <param name="writer">Where to write.</param>
    /// <exception cref="InvalidOperationException">Not at a round start.</exception>
    /// <exception cref="NotSupportedException">The scheme keeps coordinator state across rounds that is not checkpointed.</exception>
    public void WriteSnapshot(BinaryWriter writer)
    {
        ArgumentNullException.ThrowIfNull(writer);
        if (!AtRoundStart || _projection is null)
        {
            throw new InvalidOperationException($"the coordinator can be checkpointed at a round start only (phase {Phase}, step {_step})");
        }
        if (_setup.Scheme is not ClearScheme)
        {
            throw new NotSupportedException($"scheme '{_setup.Scheme.Name}' cannot be checkpointed (only the clear schemes)");
        }
        writer.Write(SnapshotVersion);
        writer.Write(_m);
        writer.Write(_round);
        writer.Write(_step);
        writer.Write(AggregatedRounds);
        writer.Write(FailedRounds);
        foreach (int n in ProjectionOutcomes)
        {
            writer.Write(n);
        }
        foreach (RegisteredHousehold? h in _registered)
        {
            writer.Write(h!.Id);
            writer.Write(h.BusId);
            writer.Write(h.TanPhi);
            writer.Write(h.ProjectionPublicKey?.Length ?? -1);
            writer.Write(h.ProjectionPublicKey ?? []);
        }
        SnapshotIO.WriteFloats(writer, _actor.Parameters);
        SnapshotIO.WriteFloats(writer, _critic.Parameters);
        _projection.WriteState(writer);
        writer.Write(StepDropouts);
        writer.Write(Rejoins);
        foreach (bool d in _dropped)
        {
            writer.Write(d);
        }
    }

    /// <summary>Restores a fresh machine (nobody joined) to the round start of <see cref="WriteSnapshot"/>; the households then <see cref="Rejoin"/>.</summary>
    /// <param name="reader">Where to read.</param>
    /// <exception cref="InvalidDataException">The snapshot does not fit this run (version, roster, shapes).</exception>
    public void RestoreSnapshot(BinaryReader reader)
    {
        ArgumentNullException.ThrowIfNull(reader);
        if (Phase != CoordinatorPhase.Admitting || _joined != 0)
        {
            throw new InvalidOperationException("a snapshot is restored into a fresh coordinator only");
        }
        int version = reader.ReadInt32();
        if (version != SnapshotVersion)
        {
            throw new InvalidDataException(version == 1
                ? $"coordinator snapshot version 1 (it does not record the households dropped at a step deadline); this build reads version {SnapshotVersion}: finish that run with the build that wrote it, or start afresh"
                : $"coordinator snapshot version {version}; this build reads {SnapshotVersion}");
        }
        int m = reader.ReadInt32();
        if (m != _m)
        {
            throw new InvalidDataException($"coordinator snapshot of {m} households; the run has {_m}");
        }
        int round = reader.ReadInt32();
        long step = reader.ReadInt64();
        if (round < 0 || (step + 1) != (long)round * _stepsPerRound)
        {
            throw new InvalidDataException($"coordinator snapshot at round {round} step {step} is not a round start of {_stepsPerRound} steps");
        }
        int aggregated = reader.ReadInt32(), failed = reader.ReadInt32();
        for (int i = 0; i < ProjectionOutcomes.Length; i++)
        {
            ProjectionOutcomes[i] = reader.ReadInt32();
        }
        var registered = new RegisteredHousehold[_m];
        for (int h = 0; h < _m; h++)
        {
            string id = reader.ReadString(), bus = reader.ReadString();
            double tanPhi = reader.ReadDouble();
            int keyLength = reader.ReadInt32();
            byte[]? key = keyLength < 0 ? null : reader.ReadBytes(keyLength);
            if (id != _setup.Roster[h])
            {
                throw new InvalidDataException($"coordinator snapshot names household '{id}' at index {h}; the roster has '{_setup.Roster[h]}'");
            }
            registered[h] = new RegisteredHousehold(h, id, bus, tanPhi, key);
        }
        SnapshotIO.ReadFloats(reader, _actor.Parameters, "actor");
        SnapshotIO.ReadFloats(reader, _critic.Parameters, "critic");
        _projection = _setup.ProjectionForm.CreateCoordinatorSide(_setup.Feeder, registered, _setup.FixedLoads, _setup.Projection);
        _projection.ReadState(reader);
        int stepDropouts = reader.ReadInt32(), rejoins = reader.ReadInt32();
        var dropped = new bool[_m];
        int droppedCount = 0;
        for (int h = 0; h < _m; h++)
        {
            dropped[h] = reader.ReadBoolean();
            droppedCount += dropped[h] ? 1 : 0;
        }
        if (stepDropouts < droppedCount || rejoins < 0)
        {
            throw new InvalidDataException($"coordinator snapshot: {droppedCount} of {_m} households dropped after {stepDropouts} step dropouts and {rejoins} rejoins");
        }
        dropped.CopyTo(_dropped, 0);
        _droppedCount = droppedCount;
        StepDropouts = stepDropouts;
        Rejoins = rejoins;
        registered.CopyTo(_registered, 0);
        _joined = _m;
        _round = round;
        _step = step;
        AggregatedRounds = aggregated;
        FailedRounds = failed;
        Phase = CoordinatorPhase.CollectingPartialSums;
    }

    /// <summary>
    /// A registered household that lost its connection joins again at a round start: its join is recorded, checked
    /// against its registration, and it is sent its admission, its projection set-up and the round's model (the shared
    /// part, as the round's broadcast; at round 0 with its own columns when the scheme sends them).
    /// </summary>
    /// <param name="message">The household's join request.</param>
    /// <param name="outbox">Where the replies go.</param>
    /// <exception cref="ProtocolException">Not at a round start, not registered, or the join differs from the registration.</exception>
    public void Rejoin(HouseholdMessage message, ICoordinatorOutbox outbox)
    {
        ArgumentNullException.ThrowIfNull(message);
        ArgumentNullException.ThrowIfNull(outbox);
        _transcript.Received(_round, -1, message);
        if (message.BodyCase != HouseholdMessage.BodyOneofCase.Join)
        {
            throw new ProtocolException($"a rejoin is a join request, not {message.BodyCase}");
        }
        JoinRequest join = message.Join;
        if (!AtRoundStart)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' rejoins in phase {Phase} at step {_step}; households rejoin at a round start");
        }
        if (!_rosterIndex.TryGetValue(join.HouseholdId, out int m) || _registered[m] is not { } r)
        {
            throw new ProtocolException($"household '{join.HouseholdId}' rejoins but is not registered");
        }
        byte[] key = join.ProjectionPublicKey.ToByteArray();
        if (join.BusId != r.BusId || join.TanPhi.CompareTo(r.TanPhi) != 0 || join.FeatureCount != _setup.FeatureCount
            || !key.AsSpan().SequenceEqual(r.ProjectionPublicKey ?? []))
        {
            throw new ProtocolException($"household '{join.HouseholdId}' rejoins with a bus, tan phi, feature count or key other than it registered with");
        }
        Send(outbox, new CoordinatorMessage { HouseholdIndex = m, Accepted = AcceptedFor(m) }, -1);
        var setupMessage = new CoordinatorMessage();
        if (_projection!.TryWriteSetup(m, setupMessage))
        {
            Send(outbox, setupMessage, -1);
        }
        bool own = _round == 0 && _setup.Scheme.ColumnsCrossWire;
        var model = new ModelBroadcast { Round = _round, Scope = own ? ParameterScope.OwnColumnsAndShared : ParameterScope.Shared };
        Append(model.ActorParameters, _actor, own ? m : -1);
        Append(model.CriticParameters, _critic, own ? m : -1);
        Send(outbox, new CoordinatorMessage { HouseholdIndex = m, Model = model }, -1);
        _transcript.Flush();
    }
}
