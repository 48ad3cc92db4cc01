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
/// aggregation are the wrapped scheme's.
/// <para>
/// Key agreement: each household side draws its key pair from the operating system's generator when it is created and
/// publishes only the public key in the scheme's key directory, which the coordinator side reads; the private key
/// never leaves the household side. In this in-process runner the directory is an object shared by both sides, not
/// a message: the public keys are not (yet) in the transcript. They reveal nothing about the partial sums.
/// </para>
/// <para>
/// Dropouts: every household of the run sends partial sums every step (the protocol has no per-step dropout), so each
/// step is <see cref="MaskedSumStatus.Complete"/>; a step the unmasker cannot complete is a
/// <see cref="ProtocolException"/>, never a mis-sum. Shamir recovery of dropped households' keys is implemented and
/// tested in <see cref="MaskedSumUnmasker"/> itself.
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

    private const int ActorChannel = 0, CriticChannel = 1;

    private readonly IFederationScheme _inner;
    private readonly byte[] _sessionId;
    private byte[]?[] _directory = [];

    /// <summary>Wraps a clear scheme.</summary>
    /// <param name="inner">The scheme whose uploads, aggregation and column policy are used (plain by default).</param>
    /// <param name="sessionId">Session identifier bound into every pairwise key (HKDF salt); 16 random bytes when null.</param>
    public MaskedSumsScheme(IFederationScheme? inner = null, byte[]? sessionId = null)
    {
        _inner = inner ?? ClearScheme.Plain();
        _sessionId = sessionId ?? RandomNumberGenerator.GetBytes(16);
    }

    /// <summary>The wrapped scheme.</summary>
    public IFederationScheme Inner => _inner;

    /// <inheritdoc />
    public string Name => SchemeName;

    /// <inheritdoc />
    public bool ColumnsCrossWire => _inner.ColumnsCrossWire;

    /// <summary>Steps the coordinator side summed (all complete).</summary>
    public long CompletedSums { get; private set; }

    /// <inheritdoc />
    public IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed)
    {
        var keys = MaskingKeyPair.Generate();
        Publish(householdIndex, keys.PublicKey);
        return new HouseholdSide(this, householdIndex, keys, _inner.CreateHouseholdSide(householdIndex, householdSeed));
    }

    /// <inheritdoc />
    public ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(householdCount, 2);
        if (_directory.Length != householdCount)
        {
            _directory = new byte[]?[householdCount];
        }
        return new CoordinatorSide(this, _inner.CreateCoordinatorSide(householdCount, actorSums, criticSums), householdCount, actorSums, criticSums);
    }

    private static FixedPointEncoding Encoding(int households) => new(MaxAbsValue, households, FractionalBits(households));

    private void Publish(int household, byte[] publicKey)
    {
        if (household < 0 || household >= _directory.Length)
        {
            throw new ProtocolException($"masked sums: household {household} outside the coordinator's {_directory.Length} households");
        }
        if (_directory[household] is not null)
        {
            throw new ProtocolException($"masked sums: household {household} published a second key");
        }
        _directory[household] = publicKey;
    }

    private byte[][] PublicKeys()
    {
        var keys = new byte[_directory.Length][];
        for (int k = 0; k < keys.Length; k++)
        {
            keys[k] = _directory[k] ?? throw new ProtocolException($"masked sums: household {k} has published no key yet");
        }
        return keys;
    }

    private static MaskContext Context(PartialSums message, int channel) => new(message.Round, message.Step, channel);

    private sealed class HouseholdSide : IHouseholdSchemeSide
    {
        private readonly MaskedSumsScheme _scheme;
        private readonly int _index;
        private readonly MaskingKeyPair _keys;
        private readonly IHouseholdSchemeSide _inner;
        private PairwiseMasker? _masker;
        private ulong[] _actor = [], _critic = [];

        public HouseholdSide(MaskedSumsScheme scheme, int index, MaskingKeyPair keys, IHouseholdSchemeSide inner)
        {
            _scheme = scheme;
            _index = index;
            _keys = keys;
            _inner = inner;
        }

        public void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message)
        {
            if (_masker is null)
            {
                // First step: every household has been admitted, so the directory is complete.
                byte[][] keys = _scheme.PublicKeys();
                _masker = new PairwiseMasker(_index, _keys, keys, _scheme._sessionId, Encoding(keys.Length), Math.Max(actor.Length, critic.Length));
                _actor = new ulong[actor.Length];
                _critic = new ulong[critic.Length];
                _keys.Dispose(); // the pairwise streams are derived; the private key is no longer needed
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

        public void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message) =>
            _inner.EncodeUpload(actor, critic, message);

        public void ModelLoaded(ReadOnlySpan<float> actorShared, ReadOnlySpan<float> criticShared) =>
            _inner.ModelLoaded(actorShared, criticShared);

        private static void Fill(Google.Protobuf.Collections.RepeatedField<ulong> target, ReadOnlySpan<ulong> values)
        {
            target.Clear();
            for (int i = 0; i < values.Length; i++)
            {
                target.Add(values[i]);
            }
        }
    }

    private sealed class CoordinatorSide : ICoordinatorSchemeSide
    {
        private readonly ICoordinatorSchemeSide _inner;

        public CoordinatorSide(MaskedSumsScheme scheme, ICoordinatorSchemeSide inner, int households, int actorSums, int criticSums)
        {
            _inner = inner;
            PartialSums = new TotalCombiner(scheme, households, actorSums, criticSums);
        }

        public IPartialSumsCombiner PartialSums { get; }

        public void AggregateUploads(IReadOnlyList<ReceivedUpload> uploads, Span<float> actorShared, Span<float> criticShared) =>
            _inner.AggregateUploads(uploads, actorShared, criticShared);
    }

    /// <summary>Sums the masked vectors in Z_2^64 and replies the decoded total to every household.</summary>
    private sealed class TotalCombiner : IPartialSumsCombiner
    {
        private readonly MaskedSumsScheme _scheme;
        private readonly int _households, _na, _nc;
        private readonly double[] _actorTotal, _criticTotal;
        private readonly ulong[] _scratch;
        private MaskedSumUnmasker? _actor, _critic;
        private bool _done;
        private int _round;
        private long _step;

        public TotalCombiner(MaskedSumsScheme scheme, int households, int actorSums, int criticSums)
        {
            _scheme = scheme;
            _households = households;
            _na = actorSums;
            _nc = criticSums;
            _actorTotal = new double[actorSums];
            _criticTotal = new double[criticSums];
            _scratch = new ulong[Math.Max(actorSums, criticSums)];
        }

        public void Begin()
        {
            if (_actor is null)
            {
                byte[][] keys = _scheme.PublicKeys();
                FixedPointEncoding encoding = Encoding(_households);
                _actor = new MaskedSumUnmasker(keys, _scheme._sessionId, encoding, _households, _na);
                _critic = new MaskedSumUnmasker(keys, _scheme._sessionId, encoding, _households, _nc);
            }
            _done = false;
            _round = -1;
        }

        public void Add(int household, PartialSums message)
        {
            if (message.Actor.Count != 0 || message.Critic.Count != 0)
            {
                throw new ProtocolException($"masked sums: household {household} sent clear partial sums");
            }
            if (_round < 0)
            {
                _round = message.Round;
                _step = message.Step;
                _actor!.Begin(Context(message, ActorChannel), _na);
                _critic!.Begin(Context(message, CriticChannel), _nc);
            }
            else if (message.Round != _round || message.Step != _step)
            {
                throw new ProtocolException($"masked sums: household {household} sent round {message.Round} step {message.Step} into round {_round} step {_step}");
            }
            Take(_actor!, household, message.MaskedActor, _na, "actor");
            Take(_critic!, household, message.MaskedCritic, _nc, "critic");
        }

        public void WriteReply(int household, SumsReply reply)
        {
            if (!_done)
            {
                Complete(_actor!, _actorTotal, "actor");
                Complete(_critic!, _criticTotal, "critic");
                _scheme.CompletedSums++;
                _done = true;
            }
            reply.Kind = SumsKind.Total;
            reply.Actor.Clear();
            reply.Critic.Clear();
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

        private static void Complete(MaskedSumUnmasker unmasker, double[] total, string what)
        {
            MaskedSumResult r = unmasker.Complete(null, total);
            if (r.Status != MaskedSumStatus.Complete)
            {
                throw new ProtocolException($"masked sums: the {what} sum of this step is {r.Status}: {r.Reason}");
            }
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
