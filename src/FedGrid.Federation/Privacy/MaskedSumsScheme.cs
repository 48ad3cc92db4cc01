using System.Numerics;
using System.Security.Cryptography;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// Scheme <c>masked-sums</c> (secure aggregation after Bonawitz et al. 2017) around a clear scheme: every decision
/// step household m encodes its partial sums in fixed point (<see cref="FixedPointEncoding"/>, ring Z_2^64, scale
/// 2^-<see cref="FractionalBits"/>, |value| ≤ <see cref="MaxAbsValue"/>) and adds its pairwise masks
/// (<see cref="PairwiseMasker"/>: P-256 ECDH, HKDF-SHA256, AES-CTR, one counter block per round, step and channel).
/// The masks cancel in the sum, so the coordinator (<see cref="MaskedSumUnmasker"/>) learns only the total and
/// replies with it (<see cref="SumsKind.Total"/>); each household subtracts its own clear part. Uploads and their
/// aggregation are the wrapped scheme's, so a seed gives the wrapped scheme's model up to fixed-point rounding.
/// <para>
/// Key agreement, as recorded protocol messages (all in the transcript, all carried by the hosts): after admission each
/// household draws two P-256 key pairs from the operating system's generator — a mask key and a share-encryption key —
/// and sends the public halves (<see cref="MaskedSumsPublicKeys"/>). Once every household has, the coordinator sends
/// the directory (<see cref="MaskedSumsKeys"/>: both keys of everyone, the session id it chose, the threshold t). Each
/// household then splits its private mask scalar into Shamir t-of-n shares and sends one to each peer encrypted for it
/// (<see cref="KeyShares"/>, <see cref="KeyShareCipher"/>); the coordinator relays each share to its holder
/// (<see cref="EncryptedKeyShare"/>) and cannot read it. Private keys never leave the household.
/// </para>
/// <para>
/// Dropouts: when a step's deadline passes with households missing (<c>Coordinator.CloseStep</c>), the coordinator
/// asks the survivors (<see cref="RecoveryRequest"/>) for their shares of the dropped households' mask keys
/// (<see cref="RecoveryShares"/>); with at least t of them it rebuilds each dropped key (checked against the published
/// public key), removes the dropped households' masks and replies the survivors' total (recorded as
/// <c>SumRecovered</c>). Below t it records <c>SumAbandoned</c> and replies <see cref="SumsKind.Abandoned"/> for this
/// and the round's later steps: no total, never a mis-sum. At the next round's start the still-dropped households are
/// excluded from everyone's masks (a <see cref="MaskedSumsKeys"/> update); a household that rejoins sends fresh keys,
/// which the coordinator relays to the others, and shares its new mask key again.
/// </para>
/// <para>
/// Limits, stated plainly: a rebuilt mask key is known to the coordinator, so a dropped household's vector that still
/// arrives late for that step would be readable by it (the coordinator refuses it, but an honest-but-curious one could
/// keep it; Bonawitz et al.'s second, self mask closes this and is not implemented). A household that rejoins holds no
/// shares of its peers' keys from before it left unless its peers' keys are unchanged (in-process its old shares stay
/// valid); the threshold then counts the shares actually held. One key-agreement session serves the run.
/// </para>
/// </summary>
public sealed class MaskedSumsScheme : IFederationScheme
{
    /// <summary>Scheme name written in messages, transcripts and summaries.</summary>
    public const string SchemeName = "masked-sums";

    /// <summary>Bound on |partial sum| (2^10); a larger partial sum stops the run with an overflow error naming it.</summary>
    public const double MaxAbsValue = 1024;

    /// <summary>
    /// Fractional bits for <paramref name="households"/> households: as many as the ring allows,
    /// 62 − ⌈log2 M⌉ − 10 (at most 52), so that M · (2^10 · 2^f + 1) &lt; 2^63; 47 bits (resolution 7e-15) for 32 households.
    /// </summary>
    /// <param name="households">M.</param>
    /// <returns>f.</returns>
    public static int FractionalBits(int households) =>
        Math.Min(52, 62 - (int)Math.Ceiling(Math.Log2(households)) - 10);

    /// <summary>The default threshold for M households: a majority, ⌊M/2⌋ + 1 (Bonawitz et al. take t &gt; n/2), at least 2.</summary>
    /// <param name="households">M.</param>
    /// <returns>t.</returns>
    public static int DefaultThreshold(int households) => Math.Min(households, Math.Max(2, households / 2 + 1));

    private const int ActorChannel = 0, CriticChannel = 1, UploadChannel = 2;

    /// <summary>The step word of the uploads' mask context (no decision step has it: steps are below 2^32 − 1).</summary>
    private const long UploadStep = uint.MaxValue;

    /// <summary>
    /// Bound on each masked-upload value (2^20): n·|θ − θ_broadcast| for a shared parameter and the sample count n. A larger
    /// value stops the run with an error naming it.
    /// </summary>
    public const double MaxAbsUploadValue = 1 << 20;

    /// <summary>Fractional bits of the uploads' encoding for M households: 62 − ⌈log2 M⌉ − 20 (at most 52); 37 for 32 households (resolution 7.3e-12).</summary>
    /// <param name="households">M.</param>
    /// <returns>f.</returns>
    public static int UploadFractionalBits(int households) =>
        Math.Min(52, 62 - (int)Math.Ceiling(Math.Log2(households)) - 20);

    /// <summary>The uploads' mask context for a round: channel 2 and a step word no decision step uses, so no upload mask stream is a partial-sums one.</summary>
    /// <param name="round">The round.</param>
    /// <returns>The context.</returns>
    public static MaskContext UploadContext(int round) => new(round, UploadStep, UploadChannel);

    /// <summary>
    /// Whether the round's uploads are masked too: each called household sends encode(v) + pairwise masks among the round's
    /// participants (<see cref="ParameterUpload.MaskedParameters"/>), v its update of the shared parameters outside the
    /// output heads relative to the broadcast, weighted by its sample count, and the sample count; the coordinator learns
    /// only the sum, from which FedAvg follows exactly. The first-layer columns and the output heads then stay home.
    /// </summary>
    public bool MaskUploads { get; }

    /// <summary>Rounds whose masked uploads were summed with every participant present.</summary>
    public long CompletedUploadSums { get; private set; }

    /// <summary>Rounds whose masked uploads were summed after removing dropped participants' masks.</summary>
    public long RecoveredUploadSums { get; private set; }

    /// <summary>Rounds whose masked uploads had no total (too few shares).</summary>
    public long AbandonedUploadSums { get; private set; }

    private readonly IFederationScheme _inner;
    private readonly byte[] _sessionId;
    private readonly int? _threshold;

    /// <summary>Wraps a clear scheme.</summary>
    /// <param name="inner">The scheme whose uploads, aggregation and column policy are used (plain by default).</param>
    /// <param name="sessionId">Session identifier the coordinator binds into every pairwise key (HKDF salt); 16 random bytes when null.</param>
    /// <param name="threshold">t of the Shamir sharing (<see cref="DefaultThreshold"/> when null); 2 ≤ t ≤ M.</param>
    /// <param name="maskUploads">Mask the round's uploads too (<see cref="MaskUploads"/>).</param>
    public MaskedSumsScheme(IFederationScheme? inner = null, byte[]? sessionId = null, int? threshold = null, bool maskUploads = false)
    {
        _inner = inner ?? ClearScheme.Plain();
        MaskUploads = maskUploads;
        _sessionId = sessionId ?? RandomNumberGenerator.GetBytes(16);
        if (threshold is < 2)
        {
            throw new ArgumentOutOfRangeException(nameof(threshold), threshold, "the threshold must be at least 2");
        }
        _threshold = threshold;
    }

    /// <summary>The wrapped scheme.</summary>
    public IFederationScheme Inner => _inner;

    /// <inheritdoc />
    public string Name => SchemeName;

    /// <inheritdoc />
    public bool ColumnsCrossWire => _inner.ColumnsCrossWire;

    /// <inheritdoc />
    public bool ColumnsInUploads => !MaskUploads && _inner.ColumnsInUploads;

    /// <inheritdoc />
    public bool HeadsStayHome => MaskUploads || _inner.HeadsStayHome;

    /// <summary>Steps the coordinator side summed with every household present.</summary>
    public long CompletedSums { get; private set; }

    /// <summary>Steps summed after removing dropped households' masks.</summary>
    public long RecoveredSums { get; private set; }

    /// <summary>Steps with no total (too few shares).</summary>
    public long AbandonedSums { get; private set; }

    /// <inheritdoc />
    public IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed) =>
        new HouseholdSide(this, householdIndex, _inner.CreateHouseholdSide(householdIndex, householdSeed));

    /// <inheritdoc />
    public ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(householdCount, 2);
        int t = _threshold ?? DefaultThreshold(householdCount);
        if (t > householdCount)
        {
            throw new ArgumentOutOfRangeException(nameof(householdCount), householdCount, $"the masked-sums threshold {t} exceeds the {householdCount} households");
        }
        return new CoordinatorSide(this, _inner.CreateCoordinatorSide(householdCount, actorSums, criticSums), householdCount, actorSums, criticSums, t);
    }

    private static FixedPointEncoding Encoding(int households) => new(MaxAbsValue, households, FractionalBits(households));

    private static FixedPointEncoding UploadEncoding(int households) => new(MaxAbsUploadValue, households, UploadFractionalBits(households));

    /// <summary>
    /// The positions of the concatenated shared parts (actor ‖ critic) a masked upload carries: every position outside the
    /// households' output heads (the heads stay with their households under masked uploads).
    /// </summary>
    private static int[] UploadPositions(UploadLayout actor, UploadLayout critic)
    {
        var head = new bool[actor.SharedLength + critic.SharedLength];
        Mark(actor, 0);
        Mark(critic, actor.SharedLength);
        var positions = new List<int>(head.Length);
        for (int i = 0; i < head.Length; i++)
        {
            if (!head[i])
            {
                positions.Add(i);
            }
        }
        return [.. positions];

        void Mark(UploadLayout layout, int start)
        {
            foreach ((int Offset, int Length)[] ranges in layout.Heads)
            {
                foreach ((int o, int n) in ranges)
                {
                    head.AsSpan(start + o, n).Fill(true);
                }
            }
        }
    }

    /// <summary>Adds an uploader's revealed shares to the shares collected for the households being recovered.</summary>
    private static void CollectShares(Dictionary<int, List<ShamirShare>> collected, int household, RecoveryShares message)
    {
        foreach (RevealedShare s in message.Shares)
        {
            if (!collected.TryGetValue(s.Owner, out List<ShamirShare>? list))
            {
                throw new ProtocolException($"masked sums: household {household} revealed a share of household {s.Owner}, which is not being recovered");
            }
            if (s.Value.Length != KeyShareCipher.ValueBytes)
            {
                throw new ProtocolException($"masked sums: household {household}'s share of household {s.Owner} is {s.Value.Length} bytes; {KeyShareCipher.ValueBytes} expected");
            }
            foreach (ShamirShare earlier in list)
            {
                if (earlier.Index == household + 1)
                {
                    throw new ProtocolException($"masked sums: household {household} revealed its share of household {s.Owner} twice");
                }
            }
            list.Add(new ShamirShare(household + 1, new BigInteger(s.Value.Span, isUnsigned: true, isBigEndian: true)));
        }
    }

    /// <summary>
    /// The collected shares as the unmasker takes them; null when no household is being recovered (every step without a
    /// dropout, so closing it allocates nothing).
    /// </summary>
    private static Dictionary<int, IReadOnlyList<ShamirShare>>? SharesOf(Dictionary<int, List<ShamirShare>> collected)
    {
        if (collected.Count == 0)
        {
            return null;
        }
        var shares = new Dictionary<int, IReadOnlyList<ShamirShare>>(collected.Count);
        foreach ((int d, List<ShamirShare> list) in collected)
        {
            shares[d] = list;
        }
        return shares;
    }

    private static MaskContext Context(PartialSums message, int channel) => new(message.Round, message.Step, channel);

    private static void CheckKey(ReadOnlySpan<byte> key, int household, string what)
    {
        if (key.Length != MaskingKeyPair.PublicKeyBytes || key[0] != 0x04)
        {
            throw new ProtocolException($"masked sums: household {household}'s {what} key is {key.Length} bytes; a P-256 public key is {MaskingKeyPair.PublicKeyBytes} bytes starting 0x04");
        }
        try
        {
            MaskingKeyPair.ImportPublic(key, out ECDiffieHellman holder).Dispose();
            holder.Dispose();
        }
        catch (CryptographicException e)
        {
            throw new ProtocolException($"masked sums: household {household}'s {what} key is not a P-256 point ({e.Message})");
        }
    }

    private sealed class HouseholdSide : IHouseholdSchemeSide
    {
        private readonly int _index;
        private readonly IHouseholdSchemeSide _inner;
        private MaskingKeyPair? _maskKeys, _shareKeys;
        private PairwiseMasker? _masker;
        private byte[]?[] _maskKeyOf = [], _shareKeyOf = [];
        private BigInteger?[] _held = [];
        private byte[] _sessionId = [];
        private int _threshold;
        private bool _ready;
        private ulong[] _actor = [], _critic = [];
        private readonly MaskedSumsScheme _scheme;
        private UploadLayout? _actorLayout, _criticLayout;
        private int[] _uploadPositions = [];
        private bool[] _participants = [];
        private int _calledRound = -1;
        private float[] _baseActor = [], _baseCritic = [];
        private double[] _uploadValues = [];
        private ulong[] _uploadWords = [];
        private FixedPointEncoding? _uploadEncoding;

        public HouseholdSide(MaskedSumsScheme scheme, int index, IHouseholdSchemeSide inner)
        {
            _scheme = scheme;
            _index = index;
            _inner = inner;
        }

        public void Configure(UploadLayout actor, UploadLayout critic)
        {
            _actorLayout = actor;
            _criticLayout = critic;
            _inner.Configure(actor, critic);
        }

        public void TrainingCalled(TrainingCall call)
        {
            _inner.TrainingCalled(call);
            if (!_scheme.MaskUploads || !call.Selected)
            {
                return;
            }
            int n = _maskKeyOf.Length;
            if (_participants.Length != n)
            {
                _participants = new bool[n];
            }
            Array.Clear(_participants);
            foreach (int k in call.Participants)
            {
                if (k < 0 || k >= n || _participants[k])
                {
                    throw new ProtocolException($"masked uploads: the training call of round {call.Round} names participant {k} (of {n}) out of range or twice");
                }
                _participants[k] = true;
            }
            if (!_participants[_index])
            {
                throw new ProtocolException($"masked uploads: household {_index} is called to train in round {call.Round} but not among the participants");
            }
            _calledRound = call.Round;
        }

        public bool TryWriteKeys(bool afterRejoin, HouseholdMessage message)
        {
            _masker?.Dispose();
            _masker = null;
            _ready = false;
            _maskKeys?.Dispose();
            _shareKeys?.Dispose();
            _maskKeys = MaskingKeyPair.Generate();
            _shareKeys = MaskingKeyPair.Generate();
            message.MaskedKeys = new MaskedSumsPublicKeys
            {
                MaskKey = Google.Protobuf.ByteString.CopyFrom(_maskKeys.PublicKey),
                ShareKey = Google.Protobuf.ByteString.CopyFrom(_shareKeys.PublicKey),
            };
            return true;
        }

        public bool TryReceive(CoordinatorMessage message, HouseholdMessage reply, out bool hasReply)
        {
            hasReply = false;
            switch (message.BodyCase)
            {
                case CoordinatorMessage.BodyOneofCase.MaskedKeys:
                    hasReply = OnKeys(message.MaskedKeys, reply);
                    return true;
                case CoordinatorMessage.BodyOneofCase.KeyShare:
                    OnShare(message.KeyShare);
                    return true;
                case CoordinatorMessage.BodyOneofCase.RecoveryRequest:
                    OnRecoveryRequest(message.RecoveryRequest, reply);
                    hasReply = true;
                    return true;
                default:
                    return false;
            }
        }

        private bool OnKeys(MaskedSumsKeys keys, HouseholdMessage reply)
        {
            if (_maskKeys is null || _shareKeys is null)
            {
                throw new ProtocolException($"masked sums: household {_index} got a key directory before it sent its keys");
            }
            if (_maskKeyOf.Length == 0)
            {
                int count = keys.Entries.Count;
                _maskKeyOf = new byte[]?[count];
                _shareKeyOf = new byte[]?[count];
                _held = new BigInteger?[count];
                _sessionId = keys.SessionId.ToByteArray();
                _threshold = keys.Threshold;
            }
            bool own = false;
            foreach (MaskedSumsKeyEntry e in keys.Entries)
            {
                int k = e.Household;
                if (k < 0 || k >= _maskKeyOf.Length)
                {
                    throw new ProtocolException($"masked sums: key directory names household {k} of {_maskKeyOf.Length}");
                }
                if (k == _index)
                {
                    if (e.Excluded || !e.MaskKey.Span.SequenceEqual(_maskKeys.PublicKey) || !e.ShareKey.Span.SequenceEqual(_shareKeys.PublicKey))
                    {
                        throw new ProtocolException($"masked sums: the key directory does not carry household {_index}'s own keys");
                    }
                    own = true;
                    continue;
                }
                byte[]? mask = e.Excluded ? null : e.MaskKey.ToByteArray(), share = e.Excluded ? null : e.ShareKey.ToByteArray();
                if (mask is not null)
                {
                    CheckKey(mask, k, "mask");
                    CheckKey(share, k, "share");
                }
                if (share is null || _shareKeyOf[k] is not { } known || !known.AsSpan().SequenceEqual(share))
                {
                    _held[k] = null; // a share of an older key of k (or of an excluded k) is of no use
                }
                bool changed = mask is null ? _maskKeyOf[k] is not null : _maskKeyOf[k] is not { } old || !old.AsSpan().SequenceEqual(mask);
                _maskKeyOf[k] = mask;
                _shareKeyOf[k] = share;
                if (_masker is not null && changed)
                {
                    if (mask is null)
                    {
                        _masker.Exclude(k);
                    }
                    else
                    {
                        _masker.Replace(k, mask);
                    }
                }
            }
            if (_ready || !own)
            {
                return false;
            }
            // The directory with this household's own (new) keys: share the mask key (the pair keys are agreed at the
            // first step, when the vector lengths are known).
            _ready = true;
            int n = _maskKeyOf.Length;
            ShamirShare[] shares = _maskKeys.SharePrivateScalar(n, _threshold);
            var message = new KeyShares();
            for (int k = 0; k < n; k++)
            {
                if (k != _index && _shareKeyOf[k] is { } peer)
                {
                    message.Shares.Add(new EncryptedKeyShare
                    {
                        Owner = _index,
                        Holder = k,
                        Ciphertext = Google.Protobuf.ByteString.CopyFrom(KeyShareCipher.Encrypt(_shareKeys, peer, _sessionId, _index, k, shares[k].Value)),
                    });
                }
            }
            reply.KeyShares = message;
            return true;
        }

        private void OnShare(EncryptedKeyShare share)
        {
            int owner = share.Owner;
            if (share.Holder != _index || owner < 0 || owner >= _shareKeyOf.Length || owner == _index || _shareKeyOf[owner] is not { } ownerKey)
            {
                throw new ProtocolException($"masked sums: household {_index} got a key share of household {owner} for household {share.Holder}, which it cannot take");
            }
            _held[owner] = KeyShareCipher.Decrypt(_shareKeys!, ownerKey, _sessionId, owner, _index, share.Ciphertext.Span);
        }

        private void OnRecoveryRequest(RecoveryRequest request, HouseholdMessage reply)
        {
            var answer = new RecoveryShares { Round = request.Round, Step = request.Step };
            Span<byte> value = stackalloc byte[KeyShareCipher.ValueBytes];
            foreach (int d in request.Dropped)
            {
                // Reveal only shares of other households (never help rebuild one's own key).
                if (d != _index && d >= 0 && d < _held.Length && _held[d] is { } v)
                {
                    KeyShareCipher.WriteValue(v, value);
                    answer.Shares.Add(new RevealedShare { Owner = d, Value = Google.Protobuf.ByteString.CopyFrom(value) });
                    _held[d] = null; // its key is rebuilt now; the share is spent
                }
            }
            reply.RecoveryShares = answer;
        }

        public void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message)
        {
            if (!_ready)
            {
                throw new ProtocolException($"masked sums: household {_index} has not received the key directory with its keys yet");
            }
            if (_masker is null)
            {
                var all = new byte[]?[_maskKeyOf.Length];
                _maskKeyOf.CopyTo(all, 0);
                all[_index] = _maskKeys!.PublicKey;
                _masker = new PairwiseMasker(_index, _maskKeys, all, _sessionId, Encoding(all.Length), Math.Max(actor.Length, critic.Length));
                _actor = new ulong[actor.Length];
                _critic = new ulong[critic.Length];
            }
            _masker.Mask(Context(message, ActorChannel), actor, _actor);
            _masker.Mask(Context(message, CriticChannel), critic, _critic);
            message.Actor.Clear();
            message.Critic.Clear();
            Fill(message.MaskedActor, _actor);
            Fill(message.MaskedCritic, _critic);
        }

        public void DecodeSums(SumsReply reply, ReadOnlySpan<float> ownActor, ReadOnlySpan<float> ownCritic, Span<float> otherActor, Span<float> otherCritic)
        {
            if (reply.Kind != SumsKind.Total)
            {
                throw new ProtocolException($"masked sums: the coordinator can only reply with the total, got {reply.Kind}");
            }
            Others(reply.TotalActor, ownActor, otherActor, "actor");
            Others(reply.TotalCritic, ownCritic, otherCritic, "critic");
        }

        private static void Others(Google.Protobuf.Collections.RepeatedField<double> total, ReadOnlySpan<float> own, Span<float> others, string what)
        {
            if (total.Count != others.Length)
            {
                throw new ProtocolException($"masked sums: {what} total carries {total.Count} values; {others.Length} expected");
            }
            for (int i = 0; i < others.Length; i++)
            {
                others[i] = (float)(total[i] - own[i]);
            }
        }

        public void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message)
        {
            _inner.EncodeUpload(actor, critic, message);
            if (!_scheme.MaskUploads)
            {
                return;
            }
            if (_masker is null || _actorLayout is null || _criticLayout is null || _calledRound != message.Round)
            {
                throw new ProtocolException($"masked uploads: household {_index} uploads for round {message.Round} without its pair keys, layouts or a training call naming the participants");
            }
            int na = _actorLayout.SharedLength, nc = _criticLayout.SharedLength;
            if (message.ActorParameters.Count != na || message.CriticParameters.Count != nc || _baseActor.Length != na || _baseCritic.Length != nc)
            {
                throw new ProtocolException($"masked uploads: household {_index}'s upload carries {message.ActorParameters.Count} + {message.CriticParameters.Count} parameters; the shared parts are {na} + {nc}");
            }
            if (_uploadPositions.Length == 0)
            {
                _uploadPositions = UploadPositions(_actorLayout, _criticLayout);
                _uploadValues = new double[_uploadPositions.Length + 1];
                _uploadWords = new ulong[_uploadPositions.Length + 1];
            }
            int length = _uploadValues.Length;
            _masker.Reserve(length); // a no-op but after a rejoin, whose fresh keys come with a new masker
            double samples = message.SampleCount;
            for (int j = 0; j < _uploadPositions.Length; j++)
            {
                int i = _uploadPositions[j];
                double trained = i < na ? message.ActorParameters[i] : message.CriticParameters[i - na];
                double broadcast = i < na ? _baseActor[i] : _baseCritic[i - na];
                _uploadValues[j] = samples * (trained - broadcast);
            }
            _uploadValues[length - 1] = samples;
            _uploadEncoding ??= UploadEncoding(_maskKeyOf.Length);
            try
            {
                _uploadEncoding.Encode(_uploadValues, _uploadWords);
            }
            catch (OverflowException e)
            {
                throw new OverflowException($"masked uploads: household {_index}'s upload of round {message.Round} does not fit the uploads' fixed-point bound (n·|Δθ| ≤ {MaxAbsUploadValue:G6}; {e.Message})", e);
            }
            _masker.AddMasks(UploadContext(message.Round), _uploadWords, _participants);
            message.ActorParameters.Clear();
            message.CriticParameters.Clear();
            message.SampleCount = 0;
            message.Scope = ParameterScope.Shared;
            Fill(message.MaskedParameters, _uploadWords);
        }

        public void ModelLoaded(ReadOnlySpan<float> actorShared, ReadOnlySpan<float> criticShared)
        {
            if (_scheme.MaskUploads)
            {
                if (_baseActor.Length != actorShared.Length) _baseActor = new float[actorShared.Length];
                if (_baseCritic.Length != criticShared.Length) _baseCritic = new float[criticShared.Length];
                actorShared.CopyTo(_baseActor);
                criticShared.CopyTo(_baseCritic);
            }
            _inner.ModelLoaded(actorShared, criticShared);
        }

        private static void Fill(Google.Protobuf.Collections.RepeatedField<ulong> target, ReadOnlySpan<ulong> values)
        {
            target.Clear();
            for (int i = 0; i < values.Length; i++)
            {
                target.Add(values[i]);
            }
        }
    }

    private sealed class CoordinatorSide : ICoordinatorSchemeSide, ICoordinatorSchemeMessages, IMaskedUploads
    {
        private UploadLayout? _actorLayout, _criticLayout;
        private int[] _positions = [];
        private MaskedSumUnmasker? _uploads;
        private readonly Dictionary<int, List<ShamirShare>> _uploadShares = [];
        private readonly List<int> _uploadPending = [];
        private ulong[] _uploadScratch = [];
        private double[] _uploadTotal = [];

        private readonly MaskedSumsScheme _scheme;
        private readonly ICoordinatorSchemeSide _inner;
        private readonly TotalCombiner _combiner;
        private readonly int _n, _threshold;
        private readonly byte[]?[] _mask, _share;
        private readonly bool[] _excluded, _rejoining, _shared;
        private readonly Google.Protobuf.ByteString _session;
        private bool _directorySent;
        private int _round;

        public CoordinatorSide(MaskedSumsScheme scheme, ICoordinatorSchemeSide inner, int households, int actorSums, int criticSums, int threshold)
        {
            _scheme = scheme;
            _inner = inner;
            _n = households;
            _threshold = threshold;
            _mask = new byte[]?[households];
            _share = new byte[]?[households];
            _excluded = new bool[households];
            _rejoining = new bool[households];
            _shared = new bool[households];
            _combiner = new TotalCombiner(scheme, households, actorSums, criticSums, threshold);
            _session = Google.Protobuf.ByteString.CopyFrom(scheme._sessionId);
        }

        public IPartialSumsCombiner PartialSums => _combiner;

        public IMaskedUploads? MaskedUploads => _scheme.MaskUploads ? this : null;

        private int UploadLength => _positions.Length + 1;

        public void Configure(UploadLayout actor, UploadLayout critic)
        {
            _actorLayout = actor;
            _criticLayout = critic;
            // Every shared position but the output heads (they stay with their households).
            _positions = UploadPositions(actor, critic);
            _uploadScratch = new ulong[UploadLength];
            _uploadTotal = new double[UploadLength];
        }

        public void Check(int household, ParameterUpload upload)
        {
            if (_uploads is null)
            {
                throw new ProtocolException($"masked uploads: household {household} uploads before every household's keys are in the directory");
            }
            if (upload.ActorParameters.Count != 0 || upload.CriticParameters.Count != 0 || upload.SampleCount != 0 || upload.Scope != ParameterScope.Shared)
            {
                throw new ProtocolException($"masked uploads: household {household} sent clear parameters or a clear sample count (scope {upload.Scope}, {upload.ActorParameters.Count} + {upload.CriticParameters.Count} values, {upload.SampleCount} samples); only masked_parameters may carry them");
            }
            if (upload.MaskedParameters.Count != UploadLength)
            {
                throw new ProtocolException($"masked uploads: household {household}'s masked upload carries {upload.MaskedParameters.Count} words; {UploadLength} expected (the {_positions.Length} shared parameters outside the output heads and the sample count)");
            }
            if (_excluded[household] || _uploads.IsRevealed(household))
            {
                throw new ProtocolException($"masked uploads: household {household} is out of the masks (dropped, its key rebuilt or excluded); it must rejoin with new keys");
            }
        }

        public IReadOnlyList<int> SharesNeeded(IReadOnlyList<int> missing, int uploaders)
        {
            _uploadPending.Clear();
            _uploadShares.Clear();
            if (uploaders < _threshold)
            {
                return [];
            }
            foreach (int d in missing)
            {
                if (!_excluded[d] && !_uploads!.IsRevealed(d))
                {
                    _uploadPending.Add(d);
                    _uploadShares[d] = [];
                }
            }
            return _uploadPending;
        }

        void IMaskedUploads.AddShares(int household, RecoveryShares message) => CollectShares(_uploadShares, household, message);

        public MaskedUploadsOutcome Aggregate(int round, IReadOnlyList<ReceivedUpload> uploads, ReadOnlySpan<bool> participants, Span<float> actorShared, Span<float> criticShared)
        {
            MaskedSumUnmasker unmasker = _uploads ?? throw new ProtocolException("masked uploads: no key directory yet");
            int length = UploadLength, na = _actorLayout!.SharedLength, nc = _criticLayout!.SharedLength;
            if (actorShared.Length != na || criticShared.Length != nc)
            {
                throw new ArgumentException($"shared parts of {actorShared.Length} + {criticShared.Length}; the layouts say {na} + {nc}");
            }
            unmasker.Begin(UploadContext(round), length, participants);
            foreach (ReceivedUpload r in uploads)
            {
                Span<ulong> v = _uploadScratch.AsSpan(0, length);
                for (int i = 0; i < length; i++)
                {
                    v[i] = r.Upload.MaskedParameters[i];
                }
                unmasker.Add(r.Household, v);
            }
            MaskedSumResult result = unmasker.Complete(SharesOf(_uploadShares), _uploadTotal);
            int[] pending = [.. _uploadPending];
            _uploadPending.Clear();
            _uploadShares.Clear();
            if (!result.HasTotal)
            {
                _scheme.AbandonedUploadSums++;
                var unrecovered = new List<int>();
                for (int k = 0; k < participants.Length; k++)
                {
                    if (participants[k] && !uploads.Any(u => u.Household == k))
                    {
                        unrecovered.Add(k);
                    }
                }
                return new MaskedUploadsOutcome(new SumsOutcome(false, [], unrecovered, $"no total of the round's masked uploads: {result.Reason}; model kept"), 0);
            }
            double samples = _uploadTotal[length - 1];
            if (samples > 0)
            {
                // FedAvg from the sum: θ_b + Σ n_k Δ_k / Σ n_k; the heads keep the broadcast value (they stay home).
                for (int j = 0; j < _positions.Length; j++)
                {
                    int i = _positions[j];
                    if (i < na)
                    {
                        actorShared[i] = (float)(actorShared[i] + (_uploadTotal[j] / samples));
                    }
                    else
                    {
                        criticShared[i - na] = (float)(criticShared[i - na] + (_uploadTotal[j] / samples));
                    }
                }
            }
            if (result.Status == MaskedSumStatus.Complete)
            {
                _scheme.CompletedUploadSums++;
                return new MaskedUploadsOutcome(SumsOutcome.Complete, (long)Math.Round(samples));
            }
            _scheme.RecoveredUploadSums++;
            return new MaskedUploadsOutcome(new SumsOutcome(true, pending, [],
                $"masks of {pending.Length} dropped participants removed from the masked uploads with the uploaders' shares (threshold {_threshold}); {result.Survivors} uploads summed"), (long)Math.Round(samples));
        }

        public void AggregateUploads(IReadOnlyList<ReceivedUpload> uploads, Span<float> actorShared, Span<float> criticShared) =>
            _inner.AggregateUploads(uploads, actorShared, criticShared);

        public bool TryReceive(int household, HouseholdMessage message, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send)
        {
            switch (message.BodyCase)
            {
                case HouseholdMessage.BodyOneofCase.MaskedKeys:
                    OnKeys(household, message.MaskedKeys, dropped, send);
                    return true;
                case HouseholdMessage.BodyOneofCase.KeyShares:
                    OnShares(household, message.KeyShares, dropped, send);
                    return true;
                default:
                    return false;
            }
        }

        private void OnKeys(int m, MaskedSumsPublicKeys keys, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send)
        {
            byte[] mask = keys.MaskKey.ToByteArray(), share = keys.ShareKey.ToByteArray();
            CheckKey(mask, m, "mask");
            CheckKey(share, m, "share");
            if (!_directorySent)
            {
                if (_mask[m] is not null)
                {
                    throw new ProtocolException($"masked sums: household {m} sent its keys twice");
                }
                _mask[m] = mask;
                _share[m] = share;
                for (int k = 0; k < _n; k++)
                {
                    if (_mask[k] is null)
                    {
                        return;
                    }
                }
                _directorySent = true;
                _combiner.Start(_mask!, _scheme._sessionId);
                if (_scheme.MaskUploads)
                {
                    _uploads = new MaskedSumUnmasker(_mask!, _scheme._sessionId, UploadEncoding(_n), _threshold, UploadLength);
                }
                send(new CoordinatorMessage { HouseholdIndex = -1, MaskedKeys = Directory(null) });
                return;
            }
            if (!_rejoining[m])
            {
                throw new ProtocolException($"masked sums: household {m} sent new keys without rejoining");
            }
            if (dropped[m])
            {
                throw new ProtocolException($"masked sums: household {m} sent keys while dropped");
            }
            _rejoining[m] = false;
            _mask[m] = mask;
            _share[m] = share;
            _excluded[m] = false;
            _shared[m] = false;
            _combiner.Replace(m, mask);
            _uploads?.Replace(m, mask);
            // The others learn the newcomer's keys; the newcomer gets the whole directory.
            MaskedSumsKeys update = Directory(m);
            for (int h = 0; h < _n; h++)
            {
                if (h != m && !dropped[h])
                {
                    send(new CoordinatorMessage { HouseholdIndex = h, MaskedKeys = update });
                }
            }
            send(new CoordinatorMessage { HouseholdIndex = m, MaskedKeys = Directory(null) });
        }

        private void OnShares(int m, KeyShares shares, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send)
        {
            if (!_directorySent || _rejoining[m] || _excluded[m])
            {
                throw new ProtocolException($"masked sums: household {m} sent key shares before its keys were in the directory");
            }
            if (_shared[m])
            {
                throw new ProtocolException($"masked sums: household {m} sent its key shares twice");
            }
            var seen = new bool[_n];
            foreach (EncryptedKeyShare s in shares.Shares)
            {
                if (s.Owner != m || s.Holder < 0 || s.Holder >= _n || s.Holder == m || seen[s.Holder] || s.Ciphertext.Length != KeyShareCipher.CiphertextBytes)
                {
                    throw new ProtocolException($"masked sums: household {m} sent a key share of household {s.Owner} for {s.Holder} ({s.Ciphertext.Length} bytes); each share is its own, for one other household, {KeyShareCipher.CiphertextBytes} bytes");
                }
                seen[s.Holder] = true;
            }
            _shared[m] = true;
            foreach (EncryptedKeyShare s in shares.Shares)
            {
                if (!dropped[s.Holder] && !_excluded[s.Holder])
                {
                    send(new CoordinatorMessage { HouseholdIndex = s.Holder, KeyShare = s });
                }
            }
        }

        public void BeginRound(int round, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send)
        {
            _round = round;
            _combiner.BeginRound();
            MaskedSumsKeys update = KeysMessage(round);
            for (int k = 0; k < _n; k++)
            {
                if (dropped[k] && !_excluded[k])
                {
                    _excluded[k] = true;
                    _combiner.Exclude(k);
                    _uploads?.Exclude(k);
                    update.Entries.Add(new MaskedSumsKeyEntry { Household = k, Excluded = true });
                }
            }
            if (update.Entries.Count > 0)
            {
                send(new CoordinatorMessage { HouseholdIndex = -1, MaskedKeys = update });
            }
        }

        public void Rejoined(int household, int round)
        {
            if (!_directorySent)
            {
                throw new ProtocolException($"masked sums: household {household} rejoins before the key directory was complete");
            }
            _rejoining[household] = true;
        }

        /// <summary>A key-directory message of the round without entries: the session id and threshold every one carries.</summary>
        private MaskedSumsKeys KeysMessage(int round) => new() { SessionId = _session, Threshold = _threshold, Round = round };

        /// <summary>The full directory (only = null) or the entry of one household.</summary>
        private MaskedSumsKeys Directory(int? only)
        {
            MaskedSumsKeys d = KeysMessage(_round);
            for (int k = 0; k < _n; k++)
            {
                if (only is { } o && o != k)
                {
                    continue;
                }
                d.Entries.Add(_excluded[k]
                    ? new MaskedSumsKeyEntry { Household = k, Excluded = true }
                    : new MaskedSumsKeyEntry { Household = k, MaskKey = Google.Protobuf.ByteString.CopyFrom(_mask[k]), ShareKey = Google.Protobuf.ByteString.CopyFrom(_share[k]) });
            }
            return d;
        }
    }

    /// <summary>Sums the masked vectors in Z_2^64, recovers dropped households' masks from survivors' shares, and replies the decoded total.</summary>
    private sealed class TotalCombiner : IPartialSumsCombiner
    {
        private readonly MaskedSumsScheme _scheme;
        private readonly int _households, _na, _nc, _threshold;
        private readonly double[] _actorTotal, _criticTotal;
        private readonly ulong[] _scratch;
        private readonly bool[] _unrecoverable;
        private readonly List<int> _pending = [];
        private readonly Dictionary<int, List<ShamirShare>> _shares = [];
        private MaskedSumUnmasker? _actor, _critic;
        private bool _hasTotal;
        private int _round;
        private long _step;

        public TotalCombiner(MaskedSumsScheme scheme, int households, int actorSums, int criticSums, int threshold)
        {
            _scheme = scheme;
            _households = households;
            _na = actorSums;
            _nc = criticSums;
            _threshold = threshold;
            _actorTotal = new double[actorSums];
            _criticTotal = new double[criticSums];
            _scratch = new ulong[Math.Max(actorSums, criticSums)];
            _unrecoverable = new bool[households];
        }

        public void Start(byte[][] maskKeys, byte[] sessionId)
        {
            FixedPointEncoding encoding = Encoding(_households);
            _actor = new MaskedSumUnmasker(maskKeys, sessionId, encoding, _threshold, _na);
            _critic = new MaskedSumUnmasker(maskKeys, sessionId, encoding, _threshold, _nc);
        }

        public void BeginRound() => Array.Clear(_unrecoverable);

        public void Exclude(int household)
        {
            _actor!.Exclude(household);
            _critic!.Exclude(household);
        }

        public void Replace(int household, byte[] maskKey)
        {
            _actor!.Replace(household, maskKey);
            _critic!.Replace(household, maskKey);
        }

        public void Begin()
        {
            if (_actor is null)
            {
                throw new ProtocolException("masked sums: partial sums before every household's keys are in the directory");
            }
            _round = -1;
            _pending.Clear();
            _shares.Clear();
        }

        public void Add(int household, PartialSums message)
        {
            if (message.Actor.Count != 0 || message.Critic.Count != 0)
            {
                throw new ProtocolException($"masked sums: household {household} sent clear partial sums");
            }
            if (_actor!.IsExcluded(household) || _actor.IsRevealed(household))
            {
                throw new ProtocolException($"masked sums: household {household} is out of the masks (dropped, its key rebuilt or excluded); it must rejoin with new keys");
            }
            if (_round < 0)
            {
                _round = message.Round;
                _step = message.Step;
                _actor.Begin(Context(message, ActorChannel), _na);
                _critic!.Begin(Context(message, CriticChannel), _nc);
            }
            else if (message.Round != _round || message.Step != _step)
            {
                throw new ProtocolException($"masked sums: household {household} sent round {message.Round} step {message.Step} into round {_round} step {_step}");
            }
            Take(_actor, household, message.MaskedActor, _na, "actor");
            Take(_critic!, household, message.MaskedCritic, _nc, "critic");
        }

        public IReadOnlyList<int> SharesNeeded(IReadOnlyList<int> missing)
        {
            _pending.Clear();
            bool lost = false;
            foreach (int d in missing)
            {
                if (_actor!.IsExcluded(d) || _actor.IsRevealed(d))
                {
                    continue;
                }
                lost |= _unrecoverable[d];
                _pending.Add(d);
            }
            if (lost)
            {
                return []; // the round is abandoned already: asking for shares would reveal keys for nothing
            }
            foreach (int d in _pending)
            {
                _shares[d] = [];
            }
            return _pending;
        }

        public void AddShares(int household, RecoveryShares message) => CollectShares(_shares, household, message);

        public SumsOutcome Close()
        {
            if (_round < 0)
            {
                throw new ProtocolException("masked sums: no partial sums in the step");
            }
            IReadOnlyDictionary<int, IReadOnlyList<ShamirShare>>? shares = SharesOf(_shares);
            MaskedSumResult a = _actor!.Complete(shares, _actorTotal);
            MaskedSumResult c = _critic!.Complete(shares, _criticTotal);
            _round = -1;
            if (a.Status == MaskedSumStatus.Complete && c.Status == MaskedSumStatus.Complete)
            {
                _hasTotal = true;
                _scheme.CompletedSums++;
                return SumsOutcome.Complete;
            }
            if (a.HasTotal && c.HasTotal)
            {
                _hasTotal = true;
                _scheme.RecoveredSums++;
                int[] recovered = [.. _pending];
                return recovered.Length == 0
                    ? SumsOutcome.Complete // masks of households rebuilt in an earlier step of the round: removed as before
                    : new SumsOutcome(true, recovered, [], $"masks of {recovered.Length} dropped households removed with the survivors' shares (threshold {_threshold}); {a.Survivors} survivors summed");
            }
            _hasTotal = false;
            _scheme.AbandonedSums++;
            foreach (int d in _pending)
            {
                _unrecoverable[d] = true;
            }
            var unrecovered = new List<int>();
            for (int k = 0; k < _households; k++)
            {
                if (_unrecoverable[k])
                {
                    unrecovered.Add(k);
                }
            }
            return new SumsOutcome(false, [], unrecovered, $"no total for the step: {(a.HasTotal ? c.Reason : a.Reason)}; the round's later steps have none either");
        }

        public void WriteReply(int household, SumsReply reply)
        {
            reply.Actor.Clear();
            reply.Critic.Clear();
            if (!_hasTotal)
            {
                reply.Kind = SumsKind.Abandoned;
                reply.TotalActor.Clear();
                reply.TotalCritic.Clear();
                return;
            }
            reply.Kind = SumsKind.Total;
            Fill(reply.TotalActor, _actorTotal);
            Fill(reply.TotalCritic, _criticTotal);
        }

        private void Take(MaskedSumUnmasker unmasker, int household, Google.Protobuf.Collections.RepeatedField<ulong> values, int expected, string what)
        {
            if (values.Count != expected)
            {
                throw new ProtocolException($"masked sums: household {household}'s {what} vector carries {values.Count} values; {expected} expected");
            }
            Span<ulong> v = _scratch.AsSpan(0, expected);
            for (int i = 0; i < expected; i++)
            {
                v[i] = values[i];
            }
            unmasker.Add(household, v);
        }

        private static void Fill(Google.Protobuf.Collections.RepeatedField<double> target, double[] values)
        {
            target.Clear();
            for (int i = 0; i < values.Length; i++)
            {
                target.Add(values[i]);
            }
        }
    }
}
