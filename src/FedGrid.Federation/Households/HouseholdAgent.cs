using FedGrid.Federation.Coordination;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;
using FedGrid.Learning.Networks;
using FedGrid.Learning.Policies;
using FedGrid.Learning.Randomness;

namespace FedGrid.Federation.Households;

/// <summary>Where a household's protocol machine stands.</summary>
public enum HouseholdPhase
{
    /// <summary>Created; <see cref="HouseholdAgent.Join"/> not called yet.</summary>
    Created,
    /// <summary>Join request sent; waiting for <see cref="JoinAccepted"/>.</summary>
    AwaitingAdmission,
    /// <summary>Waiting for the model of the current round.</summary>
    AwaitingModel,
    /// <summary>Holds the round's model; the next decision step may begin.</summary>
    Ready,
    /// <summary>Partial sums sent; waiting for the sums reply.</summary>
    AwaitingSums,
    /// <summary>Projection inputs sent; waiting for the final setpoint.</summary>
    AwaitingSetpoint,
    /// <summary>Final setpoint known; waiting for the household's own cost of the step.</summary>
    AwaitingCost,
}

/// <summary>A household's identity as it presents itself when joining.</summary>
/// <param name="Id">Household id.</param>
/// <param name="BusId">Feeder bus it is connected to.</param>
/// <param name="TanPhi">Reactive per real power of the household.</param>
/// <param name="FeatureCount">Features of its state block x_m.</param>
public sealed record HouseholdIdentity(string Id, string BusId, double TanPhi, int FeatureCount);

/// <summary>
/// The household side of the protocol as an explicit state machine (<see cref="Phase"/>). Inputs are coordinator
/// messages (<see cref="Receive"/>) and the household's own readings (<see cref="BeginStep"/>, <see cref="CompleteStep"/>);
/// outputs are the messages it returns. Per decision step it sends its partial sums, completes the forward pass with
/// the others' sums, proposes a setpoint inside its box, sends the projection inputs (through the
/// <see cref="IProjectionInputsForm"/>), applies the final setpoint and observes its own cost. At a round's end, when
/// called, it trains on its own transitions and uploads. On the warm-start steps (<see cref="FederationOptions.WarmStartSteps"/>)
/// it proposes its demonstrator's setpoint instead of sampling its policy and, at those rounds' ends, clones it
/// (<see cref="LocalTrainer.WarmStart"/>) before it uploads; the messages are the same. It holds only its own data; nothing is shared with the
/// coordinator except through returned messages.
/// <para>
/// Returned messages are reused by the next call (allocation-free decision steps): send or copy them first. A message
/// that does not fit the phase, round or step throws <see cref="ProtocolException"/> and leaves the state unchanged.
/// </para>
/// </summary>
public sealed class HouseholdAgent
{
    private readonly HouseholdIdentity _identity;
    private readonly FederationOptions _options;
    private readonly IFederationScheme _scheme;
    private readonly IProjectionInputsForm _form;
    private readonly ulong _seed;
    private readonly HouseholdMessage _out = new();
    private readonly PartialSums _partialSums = new();
    private readonly ParameterUpload _upload = new();
    private readonly JoinRequest _join;
    private IHouseholdSchemeSide? _schemeSide;
    private readonly IHouseholdProjectionSide _projectionSide;
    private DenseNetwork? _actor, _critic;
    private NetworkWorkspace? _decision;
    private LocalTrainer? _trainer;
    private TransitionBuffer? _buffer;
    private LearningRandom? _random;
    private float[] _x = [], _ownActor = [], _ownCritic = [], _actorOut = [], _uploadActor = [], _uploadCritic = [];
    private float[] _lo = [], _hi = [], _action = [];
    private int _index = -1, _householdCount, _stepsPerRound, _round;
    private long _step = -1;
    private double _flexMin, _flexMax, _baseKw, _proposal, _setpoint, _demonstration = double.NaN;
    private int _pendingTrainingRound = -1;
    private bool _pendingSelected, _hasModel, _rejoining, _stepStored;
    private float[] _heads = [];
    private readonly RejoinRequest _rejoin = new();

    /// <summary>Creates a household machine.</summary>
    /// <param name="identity">Who the household is.</param>
    /// <param name="options">Learning settings (must match the coordinator's).</param>
    /// <param name="scheme">The scheme (its name must match the coordinator's).</param>
    /// <param name="householdSeed">The household's own seed: exploration noise and, under private-columns, its W_m (never sent).</param>
    /// <param name="projectionForm">Projection-input form (household form when null).</param>
    public HouseholdAgent(HouseholdIdentity identity, FederationOptions options, IFederationScheme scheme, ulong householdSeed,
        IProjectionInputsForm? projectionForm = null)
    {
        ArgumentNullException.ThrowIfNull(identity);
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(scheme);
        ArgumentOutOfRangeException.ThrowIfLessThan(identity.FeatureCount, 1);
        _identity = identity;
        _options = options;
        _scheme = scheme;
        _form = projectionForm ?? new HouseholdProjectionInputs();
        _seed = householdSeed;
        _join = new JoinRequest
        {
            HouseholdId = identity.Id,
            ProtocolVersion = 1,
            FeatureCount = identity.FeatureCount,
            BusId = identity.BusId,
            TanPhi = identity.TanPhi,
        };
        _projectionSide = _form.CreateHouseholdSide(householdSeed);
        _projectionSide.WriteJoin(_join);
    }

    /// <summary>The machine's phase.</summary>
    public HouseholdPhase Phase { get; private set; } = HouseholdPhase.Created;

    /// <summary>The household's identity.</summary>
    public HouseholdIdentity Identity => _identity;

    /// <summary>Block index m assigned at admission (−1 before).</summary>
    public int Index => _index;

    /// <summary>Round the household is in.</summary>
    public int Round => _round;

    /// <summary>The final setpoint of the current step, kW (valid in <see cref="HouseholdPhase.AwaitingCost"/>).</summary>
    public double Setpoint => _setpoint;

    /// <summary>The household's proposal of the current step, kW.</summary>
    public double Proposal => _proposal;

    /// <summary>The household's actor network (its own copy; W_m is its own columns).</summary>
    public DenseNetwork Actor => _actor ?? throw new InvalidOperationException("not admitted yet");

    /// <summary>The household's critic network.</summary>
    public DenseNetwork Critic => _critic ?? throw new InvalidOperationException("not admitted yet");

    internal TransitionBuffer? Buffer => _buffer;

    /// <summary>The actor's and critic's losses of the last pass of the household's last local warm start, or null before one.</summary>
    public (double ActorLoss, double CriticLoss)? LastWarmStartLoss { get; private set; }

    /// <summary>Optimiser steps of the household's local training since its optimisers were last reset.</summary>
    public long LocalOptimiserSteps => _trainer?.Steps ?? 0;

    /// <summary>Transitions in the household's buffer.</summary>
    public int BufferedTransitions => _buffer?.Count ?? 0;

    /// <summary>Sends the join request.</summary>
    /// <returns>The message to send.</returns>
    public HouseholdMessage Join()
    {
        Expect(HouseholdPhase.Created, "join");
        _out.HouseholdIndex = -1;
        _out.Join = _join;
        Phase = HouseholdPhase.AwaitingAdmission;
        return _out;
    }

    /// <summary>Handles one coordinator message addressed to this household (or to every household).</summary>
    /// <param name="message">The message.</param>
    /// <returns>The reply to send, or null.</returns>
    public HouseholdMessage? Receive(CoordinatorMessage message)
    {
        ArgumentNullException.ThrowIfNull(message);
        if (message.HouseholdIndex != -1 && _index >= 0 && message.HouseholdIndex != _index)
        {
            throw new ProtocolException($"household {_index} received a message for household {message.HouseholdIndex}");
        }
        switch (message.BodyCase)
        {
            case CoordinatorMessage.BodyOneofCase.Accepted:
                Admit(message.Accepted);
                return _schemeSide!.TryWriteKeys(false, Outgoing()) ? _out : null;
            case CoordinatorMessage.BodyOneofCase.Model:
                bool rejoined = LoadModel(message.Model);
                return rejoined && _schemeSide!.TryWriteKeys(true, Outgoing()) ? _out : null;
            case CoordinatorMessage.BodyOneofCase.Sums:
                return OnSums(message.Sums);
            case CoordinatorMessage.BodyOneofCase.Training:
                return OnTrainingCall(message.Training);
            default:
                if (_index >= 0 && Phase != HouseholdPhase.AwaitingAdmission && _projectionSide.TryReadSetup(_index, message))
                {
                    return null;
                }
                if (_schemeSide is not null && _schemeSide.TryReceive(message, Outgoing(), out bool hasReply))
                {
                    return hasReply ? _out : null;
                }
                if (Phase == HouseholdPhase.AwaitingSetpoint && _projectionSide.TryReadSetpoint(message, _flexMin, _flexMax, out double s, out int sRound, out long sStep))
                {
                    CheckStep(sRound, sStep, "final setpoint");
                    _setpoint = s;
                    Phase = HouseholdPhase.AwaitingCost;
                    return null;
                }
                throw new ProtocolException($"household {_index} in phase {Phase} cannot take a {message.BodyCase} message");
        }
    }

    /// <summary>
    /// Asks to take part again after the coordinator dropped the household out of a round (it missed a step's deadline):
    /// call at the start of a later round, before its first step. The household forgets the step it was in and the
    /// transitions it buffered (they no longer join up), and waits for the current model; under masked sums it then
    /// sends fresh keys.
    /// </summary>
    /// <returns>The rejoin request to send.</returns>
    public HouseholdMessage Rejoin()
    {
        if (_index < 0 || !_hasModel)
        {
            throw new ProtocolException($"household {_identity.Id} cannot rejoin before it was admitted and had a model");
        }
        if (Phase == HouseholdPhase.AwaitingModel && !_rejoining)
        {
            _round--; // it left after its round's training (masked uploads: its upload was lost): that round was its last
        }
        _rejoin.LastRound = _round;
        _buffer!.Count = 0;
        _pendingTrainingRound = -1;
        _rejoining = true;
        _out.HouseholdIndex = _index;
        _out.Rejoin = _rejoin;
        Phase = HouseholdPhase.AwaitingModel;
        return _out;
    }

    /// <summary>
    /// Starts decision step <paramref name="step"/> with the household's own readings: computes and returns its partial sums.
    /// </summary>
    /// <param name="step">Decision step (counted over the whole run; its round is step / steps per round).</param>
    /// <param name="features">The household's state block x_m.</param>
    /// <param name="flexMinKw">Least flexible power of the slot, kW.</param>
    /// <param name="flexMaxKw">Desired flexible power of the slot, kW.</param>
    /// <param name="baseKw">Base load of the slot, kW.</param>
    /// <param name="demonstrationKw">
    /// On a warm-start step (step &lt; <see cref="FederationOptions.WarmStartSteps"/>, required there and refused elsewhere):
    /// the setpoint the household's own demonstrator rule picks from its own readings and public prices. The household
    /// then proposes it (clamped to its box) instead of sampling its policy, and stores its cloned pre-squash target
    /// (<see cref="FedGrid.Learning.ActorCritic.ActorCriticLearner.CloneTarget"/>) for the round-end warm start.
    /// </param>
    /// <returns>The partial-sums message to send.</returns>
    public HouseholdMessage BeginStep(long step, ReadOnlySpan<float> features, double flexMinKw, double flexMaxKw, double baseKw,
        double? demonstrationKw = null)
    {
        Expect(HouseholdPhase.Ready, "begin a step");
        if (step / _stepsPerRound != _round)
        {
            throw new ProtocolException($"household {_index}: step {step} is not in round {_round}");
        }
        if (step <= _step)
        {
            throw new ProtocolException($"household {_index}: step {step} does not follow step {_step}");
        }
        if (features.Length != _x.Length)
        {
            throw new ArgumentException($"the household's state block has {_x.Length} features, got {features.Length}", nameof(features));
        }
        if (!(flexMaxKw >= flexMinKw))
        {
            throw new ArgumentException($"flexible box [{flexMinKw}, {flexMaxKw}] kW is inverted");
        }
        bool warm = step < _options.WarmStartSteps;
        if (warm != demonstrationKw.HasValue || (demonstrationKw is { } dk && !double.IsFinite(dk)))
        {
            throw new ArgumentException(warm
                ? $"household {_index}: step {step} is a warm-start step (the first {_options.WarmStartSteps}); a finite demonstration setpoint is needed"
                : $"household {_index}: step {step} is past the warm start ({_options.WarmStartSteps} steps); no demonstration is taken", nameof(demonstrationKw));
        }
        _demonstration = demonstrationKw ?? double.NaN;
        _step = step;
        features.CopyTo(_x);
        _flexMin = flexMinKw;
        _flexMax = flexMaxKw;
        _baseKw = baseKw;
        _actor!.PartialSums(_index, _x, _ownActor);
        _critic!.PartialSums(_index, _x, _ownCritic);
        _partialSums.Round = _round;
        _partialSums.Step = step;
        _schemeSide!.EncodePartialSums(_ownActor, _ownCritic, _partialSums);
        _out.HouseholdIndex = _index;
        _out.PartialSums = _partialSums;
        Phase = HouseholdPhase.AwaitingSums;
        return _out;
    }

    /// <summary>Ends the current step with the household's own observed cost (bill plus discomfort, $).</summary>
    /// <param name="cost">The cost.</param>
    /// <returns>An upload when a training call arrived before the cost (then the household trains now), else null.</returns>
    public HouseholdMessage? CompleteStep(double cost)
    {
        Expect(HouseholdPhase.AwaitingCost, "complete a step");
        TransitionBuffer b = _buffer!;
        if (_stepStored)
        {
            int row = b.Count - 1; // the row of this step was filled at the sums reply
            b.Cost[row] = (float)cost;
        }
        Phase = HouseholdPhase.Ready;
        if (_pendingTrainingRound >= 0)
        {
            int r = _pendingTrainingRound;
            _pendingTrainingRound = -1;
            return Train(r, _pendingSelected);
        }
        return null;
    }

    private void Admit(JoinAccepted accepted)
    {
        Expect(HouseholdPhase.AwaitingAdmission, "be admitted");
        if (accepted.Scheme != _scheme.Name)
        {
            throw new ProtocolException($"coordinator runs scheme '{accepted.Scheme}', household speaks '{_scheme.Name}'");
        }
        if (accepted.ProjectionInputs != _form.Name)
        {
            throw new ProtocolException($"coordinator wants '{accepted.ProjectionInputs}' projection inputs, household sends '{_form.Name}'");
        }
        int m = accepted.HouseholdIndex;
        NetworkShape actorShape = ShapeCodec.FromSpec(accepted.ActorShape), criticShape = ShapeCodec.FromSpec(accepted.CriticShape);
        if (m < 0 || m >= accepted.HouseholdCount || actorShape.BlockCount != accepted.HouseholdCount
            || actorShape.InputBlocks[m] != _identity.FeatureCount || criticShape.InputBlocks[m] != _identity.FeatureCount)
        {
            throw new ProtocolException("admission does not fit the household (index, household count or feature count)");
        }
        if (accepted.StepsPerRound < 1)
        {
            throw new ProtocolException("admission names no steps per round");
        }
        _index = m;
        _householdCount = accepted.HouseholdCount;
        _stepsPerRound = accepted.StepsPerRound;
        _actor = new DenseNetwork(actorShape);
        _critic = new DenseNetwork(criticShape);
        _decision = _actor.CreateWorkspace();
        _trainer = new LocalTrainer(m, _actor, _critic, _options.Learning, _options.LocalTraining);
        int k = actorShape.OutputSize / (2 * _householdCount);
        _buffer = new TransitionBuffer(_stepsPerRound + 1, _identity.FeatureCount, actorShape.FirstLayerSize, criticShape.FirstLayerSize, k);
        _random = new LearningRandom(LearningRandom.DeriveSeed(_seed, 1));
        _x = new float[_identity.FeatureCount];
        _ownActor = new float[actorShape.FirstLayerSize];
        _ownCritic = new float[criticShape.FirstLayerSize];
        _actorOut = new float[actorShape.OutputSize];
        _lo = new float[k];
        _hi = new float[k];
        _action = new float[k];
        int ownA = _scheme.ColumnsInUploads ? _actor.FirstLayerBlockRange(m).Length : 0;
        int ownC = _scheme.ColumnsInUploads ? _critic.FirstLayerBlockRange(m).Length : 0;
        _uploadActor = new float[ownA + _actor.SharedRange().Length];
        _uploadCritic = new float[ownC + _critic.SharedRange().Length];
        _schemeSide = _scheme.CreateHouseholdSide(m, _seed);
        _schemeSide.Configure(UploadLayout.Of(_actor, _householdCount, 2 * k), UploadLayout.Of(_critic, _householdCount, criticShape.OutputSize / _householdCount));
        if (!_scheme.ColumnsCrossWire)
        {
            // The household draws its own first-layer columns (same distribution as the coordinator's initialisation).
            DrawOwnColumns(_actor, LearningRandom.DeriveSeed(_seed, 2));
            DrawOwnColumns(_critic, LearningRandom.DeriveSeed(_seed, 3));
        }
        _round = 0;
        Phase = HouseholdPhase.AwaitingModel;
    }

    private void DrawOwnColumns(DenseNetwork network, ulong seed)
    {
        var scratch = new DenseNetwork(network.Shape);
        scratch.Initialise(seed, _options.Learning.InitialOutputScale);
        var (o, n) = network.FirstLayerBlockRange(_index);
        scratch.Parameters.Slice(o, n).CopyTo(network.Parameters.Slice(o, n));
    }

    private bool LoadModel(ModelBroadcast model)
    {
        Expect(HouseholdPhase.AwaitingModel, "load a model");
        bool rejoined = _rejoining;
        if (rejoined ? model.Round <= _round : model.Round != _round)
        {
            throw new ProtocolException($"household {_index} waits for the model of {(rejoined ? "a round after" : "round")} {_round}, got round {model.Round}");
        }
        bool own = model.Scope == ParameterScope.OwnColumnsAndShared;
        if (own && !_scheme.ColumnsCrossWire)
        {
            throw new ProtocolException($"scheme '{_scheme.Name}' never sends first-layer columns");
        }
        if (model.Scope != ParameterScope.Shared && !own)
        {
            throw new ProtocolException($"model scope {model.Scope} is not understood");
        }
        if (!_hasModel && _scheme.ColumnsCrossWire && !own)
        {
            throw new ProtocolException("the first model must carry the household's first-layer columns");
        }
        bool keepHeads = _hasModel && _scheme.HeadsStayHome;
        if (keepHeads)
        {
            Heads(save: true);
        }
        Load(_actor!, model.ActorParameters, own, "actor");
        Load(_critic!, model.CriticParameters, own, "critic");
        if (keepHeads)
        {
            Heads(save: false); // masked uploads: the head never left, the broadcast's copy is the coordinator's stale one
        }
        var (aso, asn) = _actor!.SharedRange();
        var (cso, csn) = _critic!.SharedRange();
        _schemeSide!.ModelLoaded(_actor.Parameters.Slice(aso, asn), _critic.Parameters.Slice(cso, csn));
        _hasModel = true;
        if (!_options.LocalTraining.KeepOptimiserState)
        {
            _trainer!.ResetOptimisers();
        }
        _round = model.Round;
        _rejoining = false;
        Phase = HouseholdPhase.Ready;
        return rejoined;
    }

    /// <summary>Copies the household's own output heads (actor and critic) into or out of <see cref="_heads"/>.</summary>
    private void Heads(bool save)
    {
        int i = 0;
        foreach ((DenseNetwork net, int outputs) in new[] { (_actor!, 2 * (_actor!.Shape.OutputSize / (2 * _householdCount))), (_critic!, _critic!.Shape.OutputSize / _householdCount) })
        {
            var ranges = Coordinator.OwnedRanges(net, _index, outputs);
            for (int r = 1; r < ranges.Length; r++)
            {
                var (o, n) = ranges[r];
                if (_heads.Length < i + n)
                {
                    Array.Resize(ref _heads, i + n);
                }
                if (save)
                {
                    net.Parameters.Slice(o, n).CopyTo(_heads.AsSpan(i, n));
                }
                else
                {
                    _heads.AsSpan(i, n).CopyTo(net.Parameters.Slice(o, n));
                }
                i += n;
            }
        }
    }

    private HouseholdMessage Outgoing()
    {
        _out.HouseholdIndex = _index;
        return _out;
    }

    private void Load(DenseNetwork network, Google.Protobuf.Collections.RepeatedField<float> values, bool own, string what)
    {
        var (so, sn) = network.SharedRange();
        var (co, cn) = network.FirstLayerBlockRange(_index);
        int expected = sn + (own ? cn : 0);
        if (values.Count != expected)
        {
            throw new ProtocolException($"{what} model carries {values.Count} parameters; {expected} expected");
        }
        for (int j = 0; j < values.Count; j++)
        {
            if (!float.IsFinite(values[j]))
            {
                throw new ProtocolException($"{what} model holds a non-finite parameter");
            }
        }
        Span<float> p = network.Parameters;
        int i = 0;
        if (own)
        {
            for (int j = 0; j < cn; j++)
            {
                p[co + j] = values[i++];
            }
        }
        for (int j = 0; j < sn; j++)
        {
            p[so + j] = values[i++];
        }
    }

    private HouseholdMessage OnSums(SumsReply reply)
    {
        Expect(HouseholdPhase.AwaitingSums, "take a sums reply");
        CheckStep(reply.Round, reply.Step, "sums reply");
        TransitionBuffer b = _buffer!;
        if (reply.Kind == SumsKind.Abandoned)
        {
            // No sum for the step (masked sums below the threshold): no policy decision. The household proposes its
            // desired power (what it would draw without the programme; the projection still bounds it) and keeps no
            // transition: the buffered ones would no longer join up across the gap.
            b.Count = 0;
            _stepStored = false;
            _proposal = _flexMax;
            _projectionSide.WriteInputs(_round, _step, _proposal, _flexMin, _flexMax, _baseKw, _out);
            _out.HouseholdIndex = _index;
            Phase = HouseholdPhase.AwaitingSetpoint;
            return _out;
        }
        _stepStored = true;
        if (b.Count == b.Capacity)
        {
            throw new ProtocolException($"household {_index}: more steps in round {_round} than the round holds");
        }
        int row = b.Count;
        Span<float> actorOthers = b.ActorOthersRow(row), criticOthers = b.CriticOthersRow(row);
        _schemeSide!.DecodeSums(reply, _ownActor, _ownCritic, actorOthers, criticOthers);
        _actor!.ForwardSplit(_index, _x, actorOthers, _decision!, _actorOut);
        int k = _action.Length;
        _lo[0] = (float)_flexMin;
        _hi[0] = (float)_flexMax;
        for (int j = 1; j < k; j++)
        {
            _lo[j] = _lo[0];
            _hi[j] = _hi[0];
        }
        Span<float> pre = b.PreSquashRow(row);
        var learning = _options.Learning;
        for (int j = 0; !double.IsNaN(_demonstration) && j < k; j++)
        {
            // Warm start: the household's own rule acts; the row keeps the target its actor will be fitted to.
            _action[j] = Math.Clamp((float)_demonstration, _lo[j], _hi[j]);
            pre[j] = FedGrid.Learning.ActorCritic.ActorCriticLearner.CloneTarget(_action[j], _lo[j], _hi[j], _options.LocalTraining.WarmStart.Edge, out _);
        }
        for (int j = 0; double.IsNaN(_demonstration) && j < k; j++)
        {
            float mean = _actorOut[2 * k * _index + j];
            float logStd = SquashedGaussian.LogStd(_actorOut[2 * k * _index + k + j], learning.LogStdMin, learning.LogStdMax);
            float u = mean + MathF.Exp(logStd) * (float)_random!.NextGaussian();
            pre[j] = u;
            _action[j] = SquashedGaussian.Squash(u, _lo[j], _hi[j]);
        }
        _x.CopyTo(b.StateRow(row));
        _lo.CopyTo(b.LowerRow(row));
        _hi.CopyTo(b.UpperRow(row));
        b.Cost[row] = 0;
        b.Count = row + 1;
        _proposal = Math.Clamp(_action[0], _flexMin, _flexMax);
        _projectionSide.WriteInputs(_round, _step, _proposal, _flexMin, _flexMax, _baseKw, _out);
        _out.HouseholdIndex = _index;
        Phase = HouseholdPhase.AwaitingSetpoint;
        return _out;
    }

    private HouseholdMessage? OnTrainingCall(TrainingCall call)
    {
        if (call.Round != _round)
        {
            throw new ProtocolException($"household {_index} is in round {_round}; training call for round {call.Round}");
        }
        if (Phase is not (HouseholdPhase.AwaitingCost or HouseholdPhase.Ready))
        {
            Expect(HouseholdPhase.Ready, "take a training call");
        }
        _schemeSide!.TrainingCalled(call);
        if (Phase == HouseholdPhase.AwaitingCost)
        {
            _pendingTrainingRound = call.Round;
            _pendingSelected = call.Selected;
            return null;
        }
        Expect(HouseholdPhase.Ready, "take a training call");
        return Train(call.Round, call.Selected);
    }

    private HouseholdMessage? Train(int round, bool selected)
    {
        TransitionBuffer b = _buffer!;
        HouseholdMessage? reply = null;
        if (selected)
        {
            int samples;
            if ((long)round * _stepsPerRound < _options.WarmStartSteps)
            {
                // A warm-start round (whole rounds; FederationOptions.Validate): every row was demonstrated.
                LastWarmStartLoss = _trainer!.WarmStart(b, LearningRandom.DeriveSeed(LearningRandom.DeriveSeed(_seed, 4), (ulong)round));
                samples = b.Count;
            }
            else
            {
                samples = _trainer!.Train(b);
            }
            int m = _index;
            if (_scheme.ColumnsInUploads)
            {
                var (co, cn) = _actor!.FirstLayerBlockRange(m);
                _actor.Parameters.Slice(co, cn).CopyTo(_uploadActor);
                var (ko, kn) = _critic!.FirstLayerBlockRange(m);
                _critic.Parameters.Slice(ko, kn).CopyTo(_uploadCritic);
                var (so, sn) = _actor.SharedRange();
                _actor.Parameters.Slice(so, sn).CopyTo(_uploadActor.AsSpan(cn));
                var (to, tn) = _critic.SharedRange();
                _critic.Parameters.Slice(to, tn).CopyTo(_uploadCritic.AsSpan(kn));
            }
            else
            {
                var (so, sn) = _actor!.SharedRange();
                _actor.Parameters.Slice(so, sn).CopyTo(_uploadActor);
                var (to, tn) = _critic!.SharedRange();
                _critic.Parameters.Slice(to, tn).CopyTo(_uploadCritic);
            }
            _upload.Round = round;
            _upload.SampleCount = samples;
            _upload.Scope = _scheme.ColumnsInUploads ? ParameterScope.OwnColumnsAndShared : ParameterScope.Shared;
            _schemeSide!.EncodeUpload(_uploadActor, _uploadCritic, _upload);
            _out.HouseholdIndex = _index;
            _out.Upload = _upload;
            reply = _out;
        }
        b.KeepLast();
        _round = round + 1;
        Phase = HouseholdPhase.AwaitingModel;
        return reply;
    }

    private void CheckStep(int round, long step, string what)
    {
        if (round != _round || step != _step)
        {
            throw new ProtocolException($"household {_index} is at round {_round} step {_step}; {what} is for round {round} step {step}");
        }
    }

    private void Expect(HouseholdPhase phase, string action)
    {
        if (Phase != phase)
        {
            throw new ProtocolException($"household {(_index >= 0 ? _index.ToString(System.Globalization.CultureInfo.InvariantCulture) : _identity.Id)} cannot {action} in phase {Phase}");
        }
    }


    // ---- Round-end checkpoint (additive region; round ends only, not on the decision-step path) ----

    private const int SnapshotVersion = 1;

    /// <summary>Whether the machine can be checkpointed now: every step of the round done, before its training call is taken.</summary>
    public bool CanSnapshot => Phase == HouseholdPhase.Ready && _hasModel && _pendingTrainingRound < 0 && _buffer is not null
        && !_options.LocalTraining.KeepOptimiserState;

    /// <summary>
    /// Writes the household's own state at a round end (after the round's steps, before its training call): round, last
    /// step, its readings of that step, its full networks (its own columns included), the round's transitions and its
    /// exploration generator. The optimisers need nothing: they are reset whenever a model arrives and step only in
    /// training (a household that keeps them, <see cref="LocalTrainingOptions.KeepOptimiserState"/>, is refused).
    /// The admission is not part of it (the caller keeps the <see cref="JoinAccepted"/> and passes it to <see cref="RestoreSnapshot"/>).
    /// </summary>
    /// <param name="writer">Where to write.</param>
    /// <exception cref="InvalidOperationException">Not at a round end (<see cref="CanSnapshot"/>).</exception>
    /// <exception cref="NotSupportedException">The scheme or projection form keeps household state that is not checkpointed.</exception>
    public void WriteSnapshot(BinaryWriter writer)
    {
        ArgumentNullException.ThrowIfNull(writer);
        if (_options.LocalTraining.KeepOptimiserState)
        {
            throw new NotSupportedException($"household {_index} keeps its optimiser moments across rounds (LocalTrainingOptions.KeepOptimiserState); they are not checkpointed");
        }
        if (!CanSnapshot)
        {
            throw new InvalidOperationException($"household {_index} can be checkpointed at a round end only (phase {Phase})");
        }
        if (_scheme is not ClearScheme || _form is not HouseholdProjectionInputs)
        {
            throw new NotSupportedException($"scheme '{_scheme.Name}' with projection form '{_form.Name}' cannot be checkpointed (only the clear schemes with the household form)");
        }
        TransitionBuffer b = _buffer!;
        writer.Write(SnapshotVersion);
        writer.Write(_index);
        writer.Write(_round);
        writer.Write(_step);
        writer.Write(_flexMin);
        writer.Write(_flexMax);
        writer.Write(_baseKw);
        writer.Write(_proposal);
        writer.Write(_setpoint);
        SnapshotIO.WriteFloats(writer, _x);
        SnapshotIO.WriteFloats(writer, _actor!.Parameters);
        SnapshotIO.WriteFloats(writer, _critic!.Parameters);
        writer.Write(b.Count);
        foreach (float[] a in new[] { b.State, b.ActorOthers, b.CriticOthers, b.PreSquash, b.Lower, b.Upper, b.Cost })
        {
            SnapshotIO.WriteFloats(writer, a);
        }
        _random!.WriteState(writer);
    }

    /// <summary>Restores a new machine (<see cref="HouseholdPhase.Created"/>) to the round end of <see cref="WriteSnapshot"/>: admitted with <paramref name="accepted"/>, then phase <see cref="HouseholdPhase.Ready"/> waiting for the round's training call.</summary>
    /// <param name="accepted">The admission the household had when it wrote the snapshot.</param>
    /// <param name="reader">Where to read.</param>
    /// <exception cref="InvalidDataException">The snapshot does not fit the admission.</exception>
    public void RestoreSnapshot(JoinAccepted accepted, BinaryReader reader)
    {
        ArgumentNullException.ThrowIfNull(accepted);
        ArgumentNullException.ThrowIfNull(reader);
        Expect(HouseholdPhase.Created, "restore a snapshot");
        int version = reader.ReadInt32();
        if (version != SnapshotVersion)
        {
            throw new InvalidDataException($"household snapshot version {version}; this build reads {SnapshotVersion}");
        }
        int index = reader.ReadInt32();
        if (index != accepted.HouseholdIndex)
        {
            throw new InvalidDataException($"household snapshot of index {index}; the admission says {accepted.HouseholdIndex}");
        }
        Phase = HouseholdPhase.AwaitingAdmission;
        Admit(accepted);
        _round = reader.ReadInt32();
        _step = reader.ReadInt64();
        _flexMin = reader.ReadDouble();
        _flexMax = reader.ReadDouble();
        _baseKw = reader.ReadDouble();
        _proposal = reader.ReadDouble();
        _setpoint = reader.ReadDouble();
        SnapshotIO.ReadFloats(reader, _x, "state block");
        SnapshotIO.ReadFloats(reader, _actor!.Parameters, "actor");
        SnapshotIO.ReadFloats(reader, _critic!.Parameters, "critic");
        TransitionBuffer b = _buffer!;
        int count = reader.ReadInt32();
        if (count < 0 || count > b.Capacity)
        {
            throw new InvalidDataException($"household snapshot holds {count} transitions; the buffer takes {b.Capacity}");
        }
        foreach (float[] a in new[] { b.State, b.ActorOthers, b.CriticOthers, b.PreSquash, b.Lower, b.Upper, b.Cost })
        {
            SnapshotIO.ReadFloats(reader, a, "transitions");
        }
        b.Count = count;
        _random!.ReadState(reader);
        _hasModel = true;
        Phase = HouseholdPhase.Ready;
    }
}
