using FedGrid.Federation.Privacy;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Schemes;

/// <summary>
/// A federated scheme: what crosses the wire and how the coordinator combines it. The protocol machines call the
/// scheme at four seams — partial sums out of a household (<see cref="IHouseholdSchemeSide.EncodePartialSums"/>),
/// the coordinator's combination and reply (<see cref="IPartialSumsCombiner"/>), the reply back into the household
/// (<see cref="IHouseholdSchemeSide.DecodeSums"/>), and parameter uploads out of a household and into the aggregate
/// (<see cref="IHouseholdSchemeSide.EncodeUpload"/>, <see cref="ICoordinatorSchemeSide.AggregateUploads"/>). Masked
/// sums, differential privacy and robust aggregation plug in here without touching the machines.
/// </summary>
public interface IFederationScheme
{
    /// <summary>Scheme name as written in messages, transcripts and summaries.</summary>
    string Name { get; }

    /// <summary>
    /// Whether a household's first-layer columns W_m cross the wire: in the initial model (coordinator → household)
    /// and in every upload (household → coordinator). False: the household draws W_m itself and keeps it.
    /// </summary>
    bool ColumnsCrossWire { get; }

    /// <summary>
    /// Whether a household's uploads carry its first-layer columns W_m (scope OWN_COLUMNS_AND_SHARED). Defaults to
    /// <see cref="ColumnsCrossWire"/>; masked uploads keep the columns home even when the initial model sends them.
    /// </summary>
    bool ColumnsInUploads => ColumnsCrossWire;

    /// <summary>
    /// Whether each household keeps its own output head (the parameters it alone trains besides W_m) instead of taking the
    /// broadcast's copy: true under masked uploads, where the head never crosses (a sum of one term would be the
    /// household's own update). Default false.
    /// </summary>
    bool HeadsStayHome => false;

    /// <summary>Creates household m's side (one per household; may hold per-household secrets and buffers).</summary>
    /// <param name="householdIndex">m.</param>
    /// <param name="householdSeed">The household's own seed (never sent).</param>
    /// <returns>The household side.</returns>
    IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed);

    /// <summary>Creates the coordinator's side.</summary>
    /// <param name="householdCount">M.</param>
    /// <param name="actorSums">Actor first-layer width H₁.</param>
    /// <param name="criticSums">Critic first-layer width.</param>
    /// <returns>The coordinator side.</returns>
    ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums);
}

/// <summary>The household's part of a scheme. Implementations allocate nothing per call after construction.</summary>
public interface IHouseholdSchemeSide
{
    /// <summary>Writes the household's partial sums into the outgoing message (identity, masking, noise …).</summary>
    /// <param name="actor">a_m = W_m x_m of the actor.</param>
    /// <param name="critic">c_m of the critic.</param>
    /// <param name="message">The outgoing message; its vectors are cleared and refilled.</param>
    void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message);

    /// <summary>Turns the coordinator's reply into the sums over the other households.</summary>
    /// <param name="reply">The reply.</param>
    /// <param name="ownActor">The household's own actor partial sums (subtracted from a TOTAL reply).</param>
    /// <param name="ownCritic">The household's own critic partial sums.</param>
    /// <param name="otherActor">Receives Σ_{k≠m} a_k.</param>
    /// <param name="otherCritic">Receives Σ_{k≠m} c_k.</param>
    void DecodeSums(SumsReply reply, ReadOnlySpan<float> ownActor, ReadOnlySpan<float> ownCritic, Span<float> otherActor, Span<float> otherCritic);

    /// <summary>Writes the locally trained parameters (in the upload's scope) into the outgoing upload.</summary>
    /// <param name="actor">Actor parameters of the scope.</param>
    /// <param name="critic">Critic parameters of the scope.</param>
    /// <param name="message">The outgoing upload; its vectors are cleared and refilled.</param>
    void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message);

    /// <summary>
    /// Told after the household loaded a broadcast model: its shared parameters as they now stand, the starting point of
    /// its local training and known to the coordinator (differential privacy noises the update relative to them).
    /// A wrapping side forwards the call. Default: nothing.
    /// </summary>
    /// <param name="actorShared">The actor's shared parameters.</param>
    /// <param name="criticShared">The critic's shared parameters.</param>
    void ModelLoaded(ReadOnlySpan<float> actorShared, ReadOnlySpan<float> criticShared)
    {
    }

    /// <summary>
    /// Told once after admission: where each household's own output head lies in the shared part of each network's upload
    /// (masked uploads treat those parameters apart). A wrapping side forwards the call. Default: nothing.
    /// </summary>
    /// <param name="actor">The actor's layout.</param>
    /// <param name="critic">The critic's layout.</param>
    void Configure(UploadLayout actor, UploadLayout critic)
    {
    }

    /// <summary>Told when a round's training call arrives (before the upload is encoded). A wrapping side forwards the call. Default: nothing.</summary>
    /// <param name="call">The call (masked uploads: the participants to mask with).</param>
    void TrainingCalled(TrainingCall call)
    {
    }

    /// <summary>
    /// Writes the scheme's own message that follows admission (<paramref name="afterRejoin"/> false) or the model that
    /// follows a rejoin (true) — masked sums: fresh public keys. False when the scheme sends none (the default).
    /// </summary>
    /// <param name="afterRejoin">Whether the household is coming back after a dropout.</param>
    /// <param name="message">The outgoing message (its body is set when true is returned).</param>
    /// <returns>Whether there is a message to send.</returns>
    bool TryWriteKeys(bool afterRejoin, HouseholdMessage message) => false;

    /// <summary>Takes a coordinator message of the scheme (key directory, relayed share, recovery request); false when it is not one.</summary>
    /// <param name="message">The message.</param>
    /// <param name="reply">The outgoing message, filled when <paramref name="hasReply"/> is set.</param>
    /// <param name="hasReply">Whether <paramref name="reply"/> is to be sent.</param>
    /// <returns>Whether the message was the scheme's.</returns>
    bool TryReceive(CoordinatorMessage message, HouseholdMessage reply, out bool hasReply)
    {
        hasReply = false;
        return false;
    }
}

/// <summary>
/// A coordinator scheme side that exchanges messages of its own besides partial sums and uploads (masked sums: key
/// agreement and dropout recovery). Everything it sends goes through <c>send</c>, which records it in the transcript.
/// </summary>
public interface ICoordinatorSchemeMessages
{
    /// <summary>Takes a household message of the scheme (not partial sums, projection inputs or uploads); false when it is not one.</summary>
    /// <param name="household">Sender.</param>
    /// <param name="message">The message (read during the call, not kept).</param>
    /// <param name="dropped">Households currently dropped (out of the round).</param>
    /// <param name="send">Sends one coordinator message (may be reused after the call).</param>
    /// <returns>Whether it was the scheme's message.</returns>
    bool TryReceive(int household, HouseholdMessage message, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send);

    /// <summary>A round begins (after the model broadcast); <paramref name="dropped"/> households are still out.</summary>
    /// <param name="round">The new round.</param>
    /// <param name="dropped">Households dropped and not (yet) back.</param>
    /// <param name="send">Sends one coordinator message.</param>
    void BeginRound(int round, ReadOnlySpan<bool> dropped, Action<CoordinatorMessage> send);

    /// <summary>A dropped household was admitted back at the start of <paramref name="round"/>.</summary>
    /// <param name="household">It.</param>
    /// <param name="round">The round.</param>
    void Rejoined(int household, int round);
}

/// <summary>The coordinator's part of a scheme.</summary>
public interface ICoordinatorSchemeSide
{
    /// <summary>Combines one decision step's partial sums and writes each household's reply.</summary>
    IPartialSumsCombiner PartialSums { get; }

    /// <summary>
    /// Aggregates a round's uploads into the shared parameters of both networks.
    /// </summary>
    /// <param name="uploads">The uploads that arrived, in household order, with their senders.</param>
    /// <param name="actorShared">Receives the actor's shared parameters.</param>
    /// <param name="criticShared">Receives the critic's shared parameters.</param>
    void AggregateUploads(IReadOnlyList<ReceivedUpload> uploads, Span<float> actorShared, Span<float> criticShared);

    /// <summary>The masked-uploads side when the scheme masks uploads (then the coordinator sees only their sum); null otherwise (the default).</summary>
    IMaskedUploads? MaskedUploads => null;
}

/// <summary>
/// Where each household's own output head lies inside the shared part of one network (the upload's SHARED scope):
/// parameters only that household trains, which FedAvg gives the household's own value rather than the average.
/// </summary>
/// <param name="SharedLength">Length of the shared part (from <c>SharedRange().Offset</c> to the end).</param>
/// <param name="Heads">Per household, its head's (offset, length) ranges relative to the shared part's start.</param>
public sealed record UploadLayout(int SharedLength, IReadOnlyList<(int Offset, int Length)[]> Heads)
{
    /// <summary>The layout of a network of <paramref name="households"/> heads of <paramref name="outputsPerHousehold"/> outputs each.</summary>
    /// <param name="network">The network.</param>
    /// <param name="households">M.</param>
    /// <param name="outputsPerHousehold">Outputs per head (2k actor, 1 critic).</param>
    /// <returns>The layout.</returns>
    public static UploadLayout Of(Learning.Networks.DenseNetwork network, int households, int outputsPerHousehold)
    {
        ArgumentNullException.ThrowIfNull(network);
        var (offset, length) = network.SharedRange();
        var heads = new (int Offset, int Length)[households][];
        for (int m = 0; m < households; m++)
        {
            var owned = Coordination.Coordinator.OwnedRanges(network, m, outputsPerHousehold);
            heads[m] = [(owned[1].Offset - offset, owned[1].Length), (owned[2].Offset - offset, owned[2].Length)];
        }
        return new UploadLayout(length, heads);
    }
}

/// <summary>
/// The coordinator's side of masked uploads: each called household sends its upload in fixed point with pairwise masks
/// among the round's participants, and the coordinator learns only the sum, with the dropped participants' masks removed
/// from the survivors' shares (or the round abandoned, never mis-summed).
/// </summary>
public interface IMaskedUploads
{
    /// <summary>Told once, at construction: the networks' layouts.</summary>
    /// <param name="actor">Actor layout.</param>
    /// <param name="critic">Critic layout.</param>
    void Configure(UploadLayout actor, UploadLayout critic);

    /// <summary>Checks one masked upload (sizes, scope, no clear values); throws <see cref="ProtocolException"/> when it does not fit.</summary>
    /// <param name="household">Sender.</param>
    /// <param name="upload">The upload.</param>
    void Check(int household, ParameterUpload upload);

    /// <summary>After the upload deadline: which of the <paramref name="missing"/> participants' masks must be recovered from the survivors' shares (empty when none can or need be).</summary>
    /// <param name="missing">Participants whose upload did not arrive.</param>
    /// <param name="uploaders">Uploads that arrived (below the threshold no shares are asked for: they could not help, and would reveal keys for nothing).</param>
    /// <returns>Households whose shares the uploaders must reveal.</returns>
    IReadOnlyList<int> SharesNeeded(IReadOnlyList<int> missing, int uploaders);

    /// <summary>Takes an uploader's revealed shares.</summary>
    /// <param name="household">The uploader.</param>
    /// <param name="message">Its shares.</param>
    void AddShares(int household, RecoveryShares message);

    /// <summary>Sums the round's masked uploads and writes the averaged shared parameters.</summary>
    /// <param name="round">The round.</param>
    /// <param name="uploads">The uploads that arrived.</param>
    /// <param name="participants">One flag per household: called to train this round.</param>
    /// <param name="actorShared">In: the broadcast actor's shared parameters; out: the aggregate (when there is a total).</param>
    /// <param name="criticShared">In: the broadcast critic's shared parameters; out: the aggregate.</param>
    /// <returns>How it ended and the total sample count.</returns>
    MaskedUploadsOutcome Aggregate(int round, IReadOnlyList<ReceivedUpload> uploads, ReadOnlySpan<bool> participants, Span<float> actorShared, Span<float> criticShared);
}

/// <summary>How a round's masked uploads were summed.</summary>
/// <param name="Sums">Whether there is a total, and which dropped participants' masks were removed or could not be.</param>
/// <param name="Samples">Σ n_k over the uploads (0 without a total).</param>
public sealed record MaskedUploadsOutcome(SumsOutcome Sums, long Samples);

/// <summary>One upload as the coordinator received it.</summary>
/// <param name="Household">Sender's index.</param>
/// <param name="Upload">The message (owned by the coordinator).</param>
public sealed record ReceivedUpload(int Household, ParameterUpload Upload);

/// <summary>The coordinator's combination of one decision step's partial sums.</summary>
public interface IPartialSumsCombiner
{
    /// <summary>Starts a step: forgets the previous step's sums.</summary>
    void Begin();

    /// <summary>Takes household m's partial sums.</summary>
    /// <param name="household">m.</param>
    /// <param name="message">Its message (read during the call, not kept).</param>
    void Add(int household, PartialSums message);

    /// <summary>Writes the reply for household m (after <see cref="Close"/>).</summary>
    /// <param name="household">m.</param>
    /// <param name="reply">The reply; its vectors are cleared and refilled.</param>
    void WriteReply(int household, SumsReply reply);

    /// <summary>
    /// After a step's deadline: which of the <paramref name="missing"/> households need their masks recovered from the
    /// survivors' shares before the sum can be completed (masked sums); empty for schemes whose sum over the households
    /// that arrived is complete by itself (the default).
    /// </summary>
    /// <param name="missing">Households of the step whose partial sums did not arrive.</param>
    /// <returns>Households whose shares the survivors must reveal.</returns>
    IReadOnlyList<int> SharesNeeded(IReadOnlyList<int> missing) => [];

    /// <summary>Takes a survivor's revealed shares (masked sums).</summary>
    /// <param name="household">The survivor.</param>
    /// <param name="message">Its shares.</param>
    void AddShares(int household, RecoveryShares message) =>
        throw new ProtocolException($"household {household} sent recovery shares, which this scheme does not use");

    /// <summary>Ends the step's combination once every household was added or the deadline passed (and any recovery is done).</summary>
    /// <returns>How it ended.</returns>
    SumsOutcome Close() => SumsOutcome.Complete;
}

/// <summary>How a step's combination of partial sums ended.</summary>
/// <param name="HasTotal">False: no sum for the step (masked sums below the threshold); replies say so, never a wrong sum.</param>
/// <param name="Recovered">Dropped households whose masks were removed from the sum.</param>
/// <param name="Unrecovered">Dropped households whose masks could not be removed (when <paramref name="HasTotal"/> is false).</param>
/// <param name="Detail">What happened, for the transcript (null when nothing out of the ordinary).</param>
public sealed record SumsOutcome(bool HasTotal, IReadOnlyList<int> Recovered, IReadOnlyList<int> Unrecovered, string? Detail)
{
    /// <summary>Every household that was expected arrived, or the sum over those that did is complete by itself.</summary>
    public static SumsOutcome Complete { get; } = new(true, [], [], null);
}

/// <summary>How a round's shared parameters are combined from the uploads (FedAvg; robust rules plug in here).</summary>
public interface IUploadAggregator
{
    /// <summary>Rule name ("fedavg", …).</summary>
    string Name { get; }

    /// <summary>Combines equally long vectors with their weights into <paramref name="result"/>.</summary>
    /// <param name="vectors">One vector per upload.</param>
    /// <param name="weights">One non-negative weight per upload (sample counts).</param>
    /// <param name="result">Receives the combination.</param>
    void Aggregate(IReadOnlyList<ReadOnlyMemory<float>> vectors, ReadOnlySpan<double> weights, Span<float> result);
}

/// <summary>
/// FedAvg (McMahan et al. 2017): the sample-count-weighted mean θ = Σ_k n_k θ_k / Σ_k n_k, accumulated in double
/// precision in upload order (deterministic).
/// </summary>
public sealed class FedAvgAggregator : IUploadAggregator
{
    private double[] _sum = [];

    /// <inheritdoc />
    public string Name => "fedavg";

    /// <inheritdoc />
    public void Aggregate(IReadOnlyList<ReadOnlyMemory<float>> vectors, ReadOnlySpan<double> weights, Span<float> result)
    {
        ArgumentNullException.ThrowIfNull(vectors);
        if (vectors.Count == 0 || weights.Length != vectors.Count)
        {
            throw new ArgumentException("FedAvg needs at least one vector and one weight per vector.");
        }
        double total = 0;
        foreach (double w in weights)
        {
            if (!(w >= 0) || !double.IsFinite(w))
            {
                throw new ArgumentException($"FedAvg weights must be finite and non-negative, got {w}.", nameof(weights));
            }
            total += w;
        }
        if (total <= 0)
        {
            throw new ArgumentException("FedAvg weights sum to zero.", nameof(weights));
        }
        if (_sum.Length != result.Length)
        {
            _sum = new double[result.Length];
        }
        Array.Clear(_sum);
        for (int k = 0; k < vectors.Count; k++)
        {
            ReadOnlySpan<float> v = vectors[k].Span;
            if (v.Length != result.Length)
            {
                throw new ArgumentException($"Upload {k} carries {v.Length} parameters; {result.Length} expected.", nameof(vectors));
            }
            double w = weights[k];
            for (int i = 0; i < v.Length; i++)
            {
                _sum[i] += w * v[i];
            }
        }
        for (int i = 0; i < result.Length; i++)
        {
            result[i] = (float)(_sum[i] / total);
        }
    }
}

/// <summary>
/// The schemes without transforms: partial sums and parameters cross in the clear; the coordinator replies with the sum
/// over the other households and aggregates the shared parameters with an <see cref="IUploadAggregator"/> (FedAvg by
/// default). <c>plain</c> also sends each household's first-layer columns (initial model and uploads);
/// <c>private-columns</c> never does.
/// </summary>
public sealed class ClearScheme : IFederationScheme
{
    private readonly Func<IUploadAggregator> _aggregator;

    private ClearScheme(string name, bool columnsCrossWire, Func<IUploadAggregator>? aggregator)
    {
        Name = name;
        ColumnsCrossWire = columnsCrossWire;
        _aggregator = aggregator ?? (() => new FedAvgAggregator());
    }

    /// <summary>Name of the plain scheme.</summary>
    public const string PlainName = "plain";

    /// <summary>Name of the private-columns scheme.</summary>
    public const string PrivateColumnsName = "private-columns";

    /// <summary>The plain scheme: everything in the clear, W_m included.</summary>
    /// <param name="aggregator">Creates the aggregation rule (FedAvg when null).</param>
    /// <returns>The scheme.</returns>
    public static ClearScheme Plain(Func<IUploadAggregator>? aggregator = null) => new(PlainName, true, aggregator);

    /// <summary>The private-columns scheme: W_m never leaves household m; only the shared parameters are averaged.</summary>
    /// <param name="aggregator">Creates the aggregation rule (FedAvg when null).</param>
    /// <returns>The scheme.</returns>
    public static ClearScheme PrivateColumns(Func<IUploadAggregator>? aggregator = null) => new(PrivateColumnsName, false, aggregator);


    /// <inheritdoc />
    public string Name { get; }

    /// <inheritdoc />
    public bool ColumnsCrossWire { get; }

    /// <inheritdoc />
    public IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed) => new ClearHouseholdSide();

    /// <inheritdoc />
    public ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums) =>
        new ClearCoordinatorSide(householdCount, actorSums, criticSums, _aggregator());

    private sealed class ClearHouseholdSide : IHouseholdSchemeSide
    {
        public void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message)
        {
            Fill(message.Actor, actor);
            Fill(message.Critic, critic);
        }

        public void DecodeSums(SumsReply reply, ReadOnlySpan<float> ownActor, ReadOnlySpan<float> ownCritic, Span<float> otherActor, Span<float> otherCritic)
        {
            Read(reply.Actor, reply.Kind, ownActor, otherActor, "actor");
            Read(reply.Critic, reply.Kind, ownCritic, otherCritic, "critic");
        }

        public void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message)
        {
            Fill(message.ActorParameters, actor);
            Fill(message.CriticParameters, critic);
        }

        private static void Read(Google.Protobuf.Collections.RepeatedField<float> sums, SumsKind kind, ReadOnlySpan<float> own, Span<float> others, string what)
        {
            if (sums.Count != others.Length)
            {
                throw new ProtocolException($"{what} sums reply carries {sums.Count} values; {others.Length} expected");
            }
            for (int i = 0; i < others.Length; i++)
            {
                others[i] = kind switch
                {
                    SumsKind.Others => sums[i],
                    SumsKind.Total => sums[i] - own[i],
                    _ => throw new ProtocolException($"sums reply of kind {kind} is not understood"),
                };
            }
        }
    }

    private sealed class ClearCoordinatorSide : ICoordinatorSchemeSide
    {
        private readonly IUploadAggregator _aggregator;

        public ClearCoordinatorSide(int householdCount, int actorSums, int criticSums, IUploadAggregator aggregator)
        {
            PartialSums = new OthersCombiner(householdCount, actorSums, criticSums);
            _aggregator = aggregator;
        }

        public IPartialSumsCombiner PartialSums { get; }

        public void AggregateUploads(IReadOnlyList<ReceivedUpload> uploads, Span<float> actorShared, Span<float> criticShared)
        {
            var actor = new ReadOnlyMemory<float>[uploads.Count];
            var critic = new ReadOnlyMemory<float>[uploads.Count];
            var weights = new double[uploads.Count];
            for (int k = 0; k < uploads.Count; k++)
            {
                ParameterUpload u = uploads[k].Upload;
                float[] a = [.. u.ActorParameters], c = [.. u.CriticParameters];
                // Under plain the upload starts with the sender's own columns; the shared part is the tail.
                actor[k] = a.AsMemory(a.Length - actorShared.Length);
                critic[k] = c.AsMemory(c.Length - criticShared.Length);
                weights[k] = u.SampleCount;
            }
            _aggregator.Aggregate(actor, weights, actorShared);
            _aggregator.Aggregate(critic, weights, criticShared);
        }
    }

    /// <summary>Replies Σ_{k≠m} a_k: the total in double precision in household order, minus household m's own part.</summary>
    private sealed class OthersCombiner : IPartialSumsCombiner
    {
        private readonly double[] _actorTotal, _criticTotal;
        private readonly float[] _actor, _critic;
        private readonly int _na, _nc;

        public OthersCombiner(int households, int actorSums, int criticSums)
        {
            _na = actorSums;
            _nc = criticSums;
            _actorTotal = new double[actorSums];
            _criticTotal = new double[criticSums];
            _actor = new float[households * actorSums];
            _critic = new float[households * criticSums];
        }

        public void Begin()
        {
            Array.Clear(_actorTotal);
            Array.Clear(_criticTotal);
        }

        public void Add(int household, PartialSums message)
        {
            Copy(message.Actor, _actor.AsSpan(household * _na, _na), _actorTotal, "actor");
            Copy(message.Critic, _critic.AsSpan(household * _nc, _nc), _criticTotal, "critic");
        }

        public void WriteReply(int household, SumsReply reply)
        {
            reply.Kind = SumsKind.Others;
            Others(reply.Actor, _actorTotal, _actor.AsSpan(household * _na, _na));
            Others(reply.Critic, _criticTotal, _critic.AsSpan(household * _nc, _nc));
        }

        private static void Copy(Google.Protobuf.Collections.RepeatedField<float> source, Span<float> own, double[] total, string what)
        {
            if (source.Count != own.Length)
            {
                throw new ProtocolException($"{what} partial sums carry {source.Count} values; {own.Length} expected");
            }
            for (int i = 0; i < own.Length; i++)
            {
                float v = source[i];
                if (!float.IsFinite(v))
                {
                    throw new ProtocolException($"{what} partial sum {i} is not finite");
                }
                own[i] = v;
                total[i] += v;
            }
        }

        private static void Others(Google.Protobuf.Collections.RepeatedField<float> target, double[] total, ReadOnlySpan<float> own)
        {
            target.Clear();
            for (int i = 0; i < own.Length; i++)
            {
                target.Add((float)(total[i] - own[i]));
            }
        }
    }

    internal static void Fill(Google.Protobuf.Collections.RepeatedField<float> target, ReadOnlySpan<float> values)
    {
        target.Clear();
        for (int i = 0; i < values.Length; i++)
        {
            target.Add(values[i]);
        }
    }
}

/// <summary>A message that breaks the protocol: wrong state, wrong round or step, wrong sizes, non-finite values.</summary>
public sealed class ProtocolException : Exception
{
    /// <summary>Creates the exception.</summary>
    /// <param name="message">What was wrong.</param>
    public ProtocolException(string message) : base(message)
    {
    }
}

/// <summary>The schemes known by name: one lookup for the train verb, the sweep, the benches and the tests.</summary>
public static class FederationSchemes
{
    /// <summary>Names of the schemes, in the order they are offered.</summary>
    public static IReadOnlyList<string> Names { get; } =
    [
        ClearScheme.PlainName, ClearScheme.PrivateColumnsName, MaskedSumsScheme.SchemeName,
        DifferentiallyPrivateScheme.SchemeName, DifferentiallyPrivateScheme.MaskedSchemeName,
    ];

    /// <summary>Whether a scheme name adds the differential-privacy layer (and takes its settings).</summary>
    /// <param name="name">A scheme name.</param>
    /// <returns>True for <c>dp</c> and <c>dp-masked-sums</c>.</returns>
    public static bool IsDifferentiallyPrivate(string name) =>
        name is DifferentiallyPrivateScheme.SchemeName or DifferentiallyPrivateScheme.MaskedSchemeName;

    /// <summary>The scheme of a name.</summary>
    /// <param name="name">One of <see cref="Names"/>.</param>
    /// <param name="aggregator">Creates the coordinator's averaging rule for the uploads (FedAvg when null).</param>
    /// <param name="privacy">Settings of the DP schemes (defaults when null; ignored by the others).</param>
    /// <returns>The scheme; <c>masked-sums</c> keeps plain's uploads and averaging, so it gives plain's model up to
    /// fixed-point rounding; <c>dp</c> is the DP layer over private-columns, <c>dp-masked-sums</c> over masked sums
    /// over private-columns (the coordinator learns only the total of the noisy partial sums).</returns>
    /// <exception cref="ArgumentException">Unknown name.</exception>
    /// <param name="maskUploads">Mask the uploads too (<see cref="MaskedSumsScheme.MaskUploads"/>); only with <c>masked-sums</c> and
    /// <c>dp-masked-sums</c> and FedAvg (the coordinator then has no individual uploads for a median or trimmed mean).</param>
    /// <exception cref="ArgumentException">Unknown name, or masked uploads with a scheme or rule they cannot work with.</exception>
    public static IFederationScheme FromName(string name, Func<IUploadAggregator>? aggregator = null, DifferentialPrivacySettings? privacy = null, bool maskUploads = false)
    {
        CheckMaskUploads(name, maskUploads, aggregator?.Invoke().Name ?? "fedavg");
        return name switch
        {
            ClearScheme.PlainName => ClearScheme.Plain(aggregator),
            ClearScheme.PrivateColumnsName => ClearScheme.PrivateColumns(aggregator),
            MaskedSumsScheme.SchemeName => new MaskedSumsScheme(ClearScheme.Plain(aggregator), maskUploads: maskUploads),
            DifferentiallyPrivateScheme.SchemeName => new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(aggregator), privacy ?? new()),
            DifferentiallyPrivateScheme.MaskedSchemeName =>
                new DifferentiallyPrivateScheme(new MaskedSumsScheme(ClearScheme.PrivateColumns(aggregator), maskUploads: maskUploads), privacy ?? new()),
            _ => throw new ArgumentException($"unknown scheme '{name}'; use {NameList()}", nameof(name)),
        };
    }

    /// <summary>Whether a scheme name can mask its uploads.</summary>
    /// <param name="name">A scheme name.</param>
    /// <returns>True for <c>masked-sums</c> and <c>dp-masked-sums</c>.</returns>
    public static bool CanMaskUploads(string name) =>
        name is MaskedSumsScheme.SchemeName or DifferentiallyPrivateScheme.MaskedSchemeName;

    /// <summary>Refuses, with a message naming the option, masked uploads with a scheme or averaging rule they cannot work with.</summary>
    /// <param name="scheme">Scheme name.</param>
    /// <param name="maskUploads">Whether uploads are to be masked.</param>
    /// <param name="aggregation">Averaging rule name (fedavg, median, trimmed-mean).</param>
    /// <exception cref="ArgumentException">The combination cannot work.</exception>
    public static void CheckMaskUploads(string scheme, bool maskUploads, string aggregation)
    {
        if (!maskUploads)
        {
            return;
        }
        if (!CanMaskUploads(scheme))
        {
            throw new ArgumentException($"--mask-uploads needs the pairwise masks of scheme masked-sums or dp-masked-sums; scheme '{scheme}' has none");
        }
        if (aggregation != "fedavg")
        {
            throw new ArgumentException($"--mask-uploads cannot be combined with --aggregation {aggregation}: the coordinator sees only the sum of the uploads, which is enough for FedAvg but not for a coordinate-wise median or trimmed mean (they need every individual upload)");
        }
    }

    /// <summary>The names as a phrase: "a, b or c".</summary>
    /// <returns>The phrase.</returns>
    public static string NameList() => string.Join(", ", Names.Take(Names.Count - 1)) + " or " + Names[^1];
}
