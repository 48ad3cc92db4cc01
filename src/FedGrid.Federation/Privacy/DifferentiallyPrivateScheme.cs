using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Privacy;

/// <summary>Settings of the differential-privacy layer (<see cref="DifferentiallyPrivateScheme"/>).</summary>
/// <param name="NoiseMultiplier">z &gt; 0: noise standard deviation over the clipping norm, the same for both channels.</param>
/// <param name="ClipNorm">C of each partial-sums vector (actor a_m, critic c_m).</param>
/// <param name="UploadClipNorm">C of each upload's update (actor, critic: the trained shared parameters minus the broadcast ones).</param>
/// <param name="Delta">δ of the reported (ε, δ).</param>
public sealed record DifferentialPrivacySettings(double NoiseMultiplier = DifferentialPrivacySettings.DefaultNoiseMultiplier,
    double ClipNorm = DifferentialPrivacySettings.DefaultClipNorm, double UploadClipNorm = DifferentialPrivacySettings.DefaultUploadClipNorm,
    double Delta = DifferentialPrivacySettings.DefaultDelta)
{
    /// <summary>Default z.</summary>
    public const double DefaultNoiseMultiplier = 1.0;

    /// <summary>Default C of the partial sums: about twice the norm of a partial-sums vector at the initial model (64 sums of 14 features in [0, 1] with weights of scale 1/√(32·14)).</summary>
    public const double DefaultClipNorm = 1.0;

    /// <summary>Default C of an upload's update.</summary>
    public const double DefaultUploadClipNorm = 1.0;

    /// <summary>Default δ: 1e-5, well below 1/M for the 32 households of the default scenario (common practice: δ ≪ 1/population).</summary>
    public const double DefaultDelta = 1e-5;

    /// <summary>Checks the values; the message names the offending setting.</summary>
    /// <exception cref="ArgumentOutOfRangeException">A value out of range.</exception>
    public void Validate()
    {
        if (!(NoiseMultiplier > 0) || !double.IsFinite(NoiseMultiplier))
            throw new ArgumentOutOfRangeException(nameof(NoiseMultiplier), NoiseMultiplier, "the noise multiplier must be positive and finite");
        if (!(ClipNorm > 0) || !double.IsFinite(ClipNorm))
            throw new ArgumentOutOfRangeException(nameof(ClipNorm), ClipNorm, "the partial-sums clipping norm must be positive and finite");
        if (!(UploadClipNorm > 0) || !double.IsFinite(UploadClipNorm))
            throw new ArgumentOutOfRangeException(nameof(UploadClipNorm), UploadClipNorm, "the upload clipping norm must be positive and finite");
        if (!(Delta > 0 && Delta < 1))
            throw new ArgumentOutOfRangeException(nameof(Delta), Delta, "δ must lie in (0, 1)");
    }
}

/// <summary>
/// Differential privacy on both learning channels, as a layer around a scheme whose first-layer columns stay home
/// (private-columns, or masked sums over private-columns):
/// <list type="bullet">
/// <item>Partial sums: before household m's partial sums leave, each of the two vectors (actor a_m, critic c_m) goes
/// through its own <see cref="GaussianMechanism"/> (clip to L2 norm C, add N(0, (zC)²) per coordinate); the wrapped
/// scheme then encodes the noisy vectors as it would the clear ones (masks them, under masked sums), and a TOTAL reply is
/// decoded against the noisy vectors that were actually sent.</item>
/// <item>Uploads (DP-FedAvg, McMahan, Ramage, Talwar &amp; Zhang 2018): the update Δ = θ_trained − θ_broadcast of the
/// shared parameters, per network, is clipped to the upload norm C_u and noised with N(0, (zC_u)²); the upload carries
/// θ_broadcast + noisy Δ. The broadcast model is known to the coordinator, and the household replaces its shared
/// parameters by the next broadcast, so everything it releases is a function of noisy updates only.</item>
/// </list>
/// Columns that cross the wire (plain) are refused: the household keeps training its own clear columns, so each
/// upload would re-release their whole clear history with fresh noise, which this accounting does not cover.
/// The noise seeds of household m are derived from its own seed, so runs stay reproducible.
/// <para>
/// Accounting (<see cref="Account"/>): adjacency is adding or removing one household's whole data (user-level),
/// so one release's L2 sensitivity is its clipping norm (twice that under replace-one adjacency: ε of z/2). Every
/// decision step releases two vectors per household, every round at most two updates, with no subsampling: the
/// coordinator knows whom it called, so no amplification by sampling is claimed. Adaptive composition of Gaussian
/// mechanisms by Rényi DP (Mironov 2017), converted to (ε, δ). The bound does not cover the projection inputs
/// (proposal, box, base load), which reach the coordinator per household or per bus without noise.
/// </para>
/// </summary>
public sealed class DifferentiallyPrivateScheme : IFederationScheme
{
    /// <summary>Scheme name of DP over private-columns.</summary>
    public const string SchemeName = "dp";

    /// <summary>Scheme name of DP over masked sums (over private-columns).</summary>
    public const string MaskedSchemeName = "dp-masked-sums";

    private readonly IFederationScheme _inner;
    private long _sumsReleased, _sumsClipped, _updatesReleased, _updatesClipped;

    /// <summary>Wraps a scheme.</summary>
    /// <param name="inner">The scheme whose messages carry the noisy values (private-columns, or masked sums over it).</param>
    /// <param name="clipNorm">C of each partial-sums vector.</param>
    /// <param name="noiseMultiplier">z &gt; 0.</param>
    /// <param name="uploadClipNorm">C of each upload update (the partial-sums C when null).</param>
    public DifferentiallyPrivateScheme(IFederationScheme inner, double clipNorm, double noiseMultiplier, double? uploadClipNorm = null)
        : this(inner, new DifferentialPrivacySettings(noiseMultiplier, clipNorm, uploadClipNorm ?? clipNorm))
    {
    }

    /// <summary>Wraps a scheme.</summary>
    /// <param name="inner">The scheme whose messages carry the noisy values (private-columns, or masked sums over it).</param>
    /// <param name="settings">z, the clipping norms and δ.</param>
    public DifferentiallyPrivateScheme(IFederationScheme inner, DifferentialPrivacySettings settings)
    {
        ArgumentNullException.ThrowIfNull(inner);
        ArgumentNullException.ThrowIfNull(settings);
        settings.Validate();
        if (inner.ColumnsCrossWire)
        {
            throw new ArgumentException($"differential privacy needs a scheme whose first-layer columns stay home; '{inner.Name}' sends them", nameof(inner));
        }
        _inner = inner;
        Settings = settings;
    }

    /// <summary>z, the clipping norms and δ.</summary>
    public DifferentialPrivacySettings Settings { get; }

    /// <summary>C of the partial sums.</summary>
    public double ClipNorm => Settings.ClipNorm;

    /// <summary>z.</summary>
    public double NoiseMultiplier => Settings.NoiseMultiplier;

    /// <summary>The wrapped scheme.</summary>
    public IFederationScheme Inner => _inner;

    /// <inheritdoc />
    public string Name => _inner is MaskedSumsScheme ? MaskedSchemeName : SchemeName;

    /// <inheritdoc />
    public bool ColumnsCrossWire => _inner.ColumnsCrossWire;

    /// <inheritdoc />
    public bool ColumnsInUploads => _inner.ColumnsInUploads;

    /// <inheritdoc />
    public bool HeadsStayHome => _inner.HeadsStayHome;

    /// <summary>Partial-sums vectors released so far, over all households (actor and critic count one each).</summary>
    public long PartialSumsReleased => Interlocked.Read(ref _sumsReleased);

    /// <summary>Of those, the vectors whose norm exceeded C and were scaled down.</summary>
    public long PartialSumsClipped => Interlocked.Read(ref _sumsClipped);

    /// <summary>Upload updates released so far (actor and critic count one each).</summary>
    public long UpdatesReleased => Interlocked.Read(ref _updatesReleased);

    /// <summary>Of those, the updates whose norm exceeded the upload C.</summary>
    public long UpdatesClipped => Interlocked.Read(ref _updatesClipped);

    /// <summary>The RDP accountant state after <paramref name="steps"/> decision steps (two releases per step).</summary>
    /// <param name="steps">Decision steps in which the household sent partial sums.</param>
    /// <returns>An accountant holding the composition.</returns>
    public RenyiDpAccountant AccountPartialSums(long steps) => Account(steps, 0);

    /// <summary>
    /// The RDP accountant state of one household after <paramref name="steps"/> decision steps and
    /// <paramref name="rounds"/> uploads: 2·steps + 2·rounds Gaussian releases at z without subsampling.
    /// </summary>
    /// <param name="steps">Decision steps in which the household sent partial sums.</param>
    /// <param name="rounds">Rounds in which it uploaded (an upper bound: every round of the run).</param>
    /// <returns>An accountant holding the composition.</returns>
    public RenyiDpAccountant Account(long steps, long rounds)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(steps);
        ArgumentOutOfRangeException.ThrowIfNegative(rounds);
        var accountant = new RenyiDpAccountant();
        accountant.AddSampledGaussian(1.0, NoiseMultiplier, 2 * (steps + rounds));
        return accountant;
    }

    /// <summary>(ε, δ) of one household after a run, at the settings' δ (see <see cref="Account"/>).</summary>
    /// <param name="steps">Decision steps of the run.</param>
    /// <param name="rounds">Rounds of the run.</param>
    /// <returns>The guarantee.</returns>
    public PrivacyGuarantee Guarantee(long steps, long rounds) => Account(steps, rounds).GetEpsilon(Settings.Delta);

    /// <inheritdoc />
    public IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed) =>
        new HouseholdSide(this, _inner.CreateHouseholdSide(householdIndex, householdSeed), householdSeed);

    /// <inheritdoc />
    public ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums) =>
        _inner.CreateCoordinatorSide(householdCount, actorSums, criticSums);

    private sealed class HouseholdSide : IHouseholdSchemeSide
    {
        private const ulong NoiseStream = 0x6470_5f6e_6f69_7365; // "dp_noise": separates the noise from other draws of the seed
        private const ulong Golden = 0x9e37_79b9_7f4a_7c15;
        private readonly DifferentiallyPrivateScheme _owner;
        private readonly IHouseholdSchemeSide _inner;
        private readonly GaussianMechanism _actorNoise, _criticNoise, _actorUpdateNoise, _criticUpdateNoise;
        private float[] _actor = [], _critic = [], _actorBase = [], _criticBase = [], _actorUpload = [], _criticUpload = [];
        private bool _hasBase;

        public HouseholdSide(DifferentiallyPrivateScheme owner, IHouseholdSchemeSide inner, ulong seed)
        {
            _owner = owner;
            _inner = inner;
            DifferentialPrivacySettings s = owner.Settings;
            ulong noiseSeed = seed ^ NoiseStream;
            _actorNoise = new GaussianMechanism(s.ClipNorm, s.NoiseMultiplier, noiseSeed);
            _criticNoise = new GaussianMechanism(s.ClipNorm, s.NoiseMultiplier, unchecked(noiseSeed + Golden));
            _actorUpdateNoise = new GaussianMechanism(s.UploadClipNorm, s.NoiseMultiplier, unchecked(noiseSeed + (2 * Golden)));
            _criticUpdateNoise = new GaussianMechanism(s.UploadClipNorm, s.NoiseMultiplier, unchecked(noiseSeed + (3 * Golden)));
        }

        public void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message)
        {
            int clipped = Noisy(ref _actor, actor, _actorNoise) + Noisy(ref _critic, critic, _criticNoise);
            Interlocked.Add(ref _owner._sumsReleased, 2);
            if (clipped > 0) Interlocked.Add(ref _owner._sumsClipped, clipped);
            _inner.EncodePartialSums(_actor, _critic, message);
        }

        public void DecodeSums(SumsReply reply, ReadOnlySpan<float> ownActor, ReadOnlySpan<float> ownCritic, Span<float> otherActor, Span<float> otherCritic) =>
            _inner.DecodeSums(reply, _actor.AsSpan(0, ownActor.Length), _critic.AsSpan(0, ownCritic.Length), otherActor, otherCritic);

        public bool TryWriteKeys(bool afterRejoin, HouseholdMessage message) => _inner.TryWriteKeys(afterRejoin, message);

        public void Configure(UploadLayout actor, UploadLayout critic) => _inner.Configure(actor, critic);

        public void TrainingCalled(TrainingCall call) => _inner.TrainingCalled(call);

        public bool TryReceive(CoordinatorMessage message, HouseholdMessage reply, out bool hasReply) =>
            _inner.TryReceive(message, reply, out hasReply);

        public void ModelLoaded(ReadOnlySpan<float> actorShared, ReadOnlySpan<float> criticShared)
        {
            Copy(ref _actorBase, actorShared);
            Copy(ref _criticBase, criticShared);
            _hasBase = true;
            _inner.ModelLoaded(actorShared, criticShared);
        }

        public void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message)
        {
            if (!_hasBase)
            {
                throw new ProtocolException("dp: an upload before any model was loaded (the update needs the broadcast parameters)");
            }
            int clipped = Update(ref _actorUpload, actor, _actorBase, _actorUpdateNoise, "actor")
                + Update(ref _criticUpload, critic, _criticBase, _criticUpdateNoise, "critic");
            Interlocked.Add(ref _owner._updatesReleased, 2);
            if (clipped > 0) Interlocked.Add(ref _owner._updatesClipped, clipped);
            _inner.EncodeUpload(_actorUpload, _criticUpload, message);
        }

        /// <summary>buffer = θ_base + clip(θ − θ_base) + noise; returns 1 when the update was clipped.</summary>
        private static int Update(ref float[] buffer, ReadOnlySpan<float> trained, float[] baseline, GaussianMechanism mechanism, string what)
        {
            if (trained.Length != baseline.Length)
            {
                throw new ProtocolException($"dp: the {what} upload carries {trained.Length} parameters, the loaded model {baseline.Length}");
            }
            if (buffer.Length != trained.Length) buffer = new float[trained.Length];
            for (int i = 0; i < trained.Length; i++) buffer[i] = trained[i] - baseline[i];
            int clipped = mechanism.Apply(buffer) > mechanism.ClipNorm ? 1 : 0;
            for (int i = 0; i < buffer.Length; i++) buffer[i] += baseline[i];
            return clipped;
        }

        private static int Noisy(ref float[] buffer, ReadOnlySpan<float> clear, GaussianMechanism mechanism)
        {
            Copy(ref buffer, clear);
            return mechanism.Apply(buffer) > mechanism.ClipNorm ? 1 : 0;
        }

        private static void Copy(ref float[] buffer, ReadOnlySpan<float> values)
        {
            if (buffer.Length != values.Length) buffer = new float[values.Length];
            values.CopyTo(buffer);
        }
    }
}
