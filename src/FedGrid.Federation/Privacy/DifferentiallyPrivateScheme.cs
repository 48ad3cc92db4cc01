using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// Differential privacy on the partial-sums channel, as a wrapper around any scheme: before household m's partial sums
/// leave, each of the two vectors (actor a_m, critic c_m) goes through its own <see cref="GaussianMechanism"/>
/// (clip to L2 norm C, add N(0, (zC)²) per coordinate); the wrapped scheme then encodes the noisy vectors as it would
/// the clear ones, and a TOTAL reply is decoded against the noisy vectors that were actually sent. Everything else
/// (uploads, aggregation, the coordinator's combination) is the wrapped scheme's. The noise seed of household m is
/// derived from its own seed, so runs stay reproducible.
/// <para>
/// Accounting: every decision step releases one clipped, noised vector per household with no subsampling, so the
/// partial sums of T steps compose as <c>accountant.AddSampledGaussian(1.0, z, T)</c> per vector (actor and critic
/// are two releases: 2T). Noise on uploads needs the update relative to the broadcast model and is not applied here.
/// </para>
/// </summary>
public sealed class DifferentiallyPrivateScheme : IFederationScheme
{
    /// <summary>Scheme name written in messages, transcripts and summaries.</summary>
    public const string SchemeName = "dp";

    private readonly IFederationScheme _inner;

    /// <summary>Wraps a scheme.</summary>
    /// <param name="inner">The scheme whose messages carry the noisy partial sums (e.g. private-columns).</param>
    /// <param name="clipNorm">C of each partial-sums vector.</param>
    /// <param name="noiseMultiplier">z.</param>
    public DifferentiallyPrivateScheme(IFederationScheme inner, double clipNorm, double noiseMultiplier)
    {
        ArgumentNullException.ThrowIfNull(inner);
        _ = new GaussianMechanism(clipNorm, noiseMultiplier, 0); // validates the parameters up front
        _inner = inner;
        ClipNorm = clipNorm;
        NoiseMultiplier = noiseMultiplier;
    }

    /// <summary>C.</summary>
    public double ClipNorm { get; }

    /// <summary>z.</summary>
    public double NoiseMultiplier { get; }

    /// <summary>The wrapped scheme.</summary>
    public IFederationScheme Inner => _inner;

    /// <inheritdoc />
    public string Name => SchemeName;

    /// <inheritdoc />
    public bool ColumnsCrossWire => _inner.ColumnsCrossWire;

    /// <summary>The RDP accountant state after <paramref name="steps"/> decision steps (two releases per step).</summary>
    /// <param name="steps">Decision steps in which the household sent partial sums.</param>
    /// <returns>An accountant holding the composition.</returns>
    public RenyiDpAccountant AccountPartialSums(long steps)
    {
        var accountant = new RenyiDpAccountant();
        if (NoiseMultiplier > 0)
        {
            accountant.AddSampledGaussian(1.0, NoiseMultiplier, 2 * steps);
        }
        return accountant;
    }

    /// <inheritdoc />
    public IHouseholdSchemeSide CreateHouseholdSide(int householdIndex, ulong householdSeed) =>
        new HouseholdSide(_inner.CreateHouseholdSide(householdIndex, householdSeed), ClipNorm, NoiseMultiplier, householdSeed);

    /// <inheritdoc />
    public ICoordinatorSchemeSide CreateCoordinatorSide(int householdCount, int actorSums, int criticSums) =>
        _inner.CreateCoordinatorSide(householdCount, actorSums, criticSums);

    private sealed class HouseholdSide : IHouseholdSchemeSide
    {
        private const ulong NoiseStream = 0x6470_5f6e_6f69_7365; // "dp_noise": separates the noise from other draws of the seed
        private readonly IHouseholdSchemeSide _inner;
        private readonly GaussianMechanism _actorNoise, _criticNoise;
        private float[] _actor = [], _critic = [];

        public HouseholdSide(IHouseholdSchemeSide inner, double clipNorm, double noiseMultiplier, ulong seed)
        {
            _inner = inner;
            _actorNoise = new GaussianMechanism(clipNorm, noiseMultiplier, seed ^ NoiseStream);
            _criticNoise = new GaussianMechanism(clipNorm, noiseMultiplier, (seed ^ NoiseStream) + 0x9e37_79b9_7f4a_7c15);
        }

        public void EncodePartialSums(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, PartialSums message)
        {
            Noisy(ref _actor, actor, _actorNoise);
            Noisy(ref _critic, critic, _criticNoise);
            _inner.EncodePartialSums(_actor, _critic, message);
        }

        public void DecodeSums(SumsReply reply, ReadOnlySpan<float> ownActor, ReadOnlySpan<float> ownCritic, Span<float> otherActor, Span<float> otherCritic) =>
            _inner.DecodeSums(reply, _actor.AsSpan(0, ownActor.Length), _critic.AsSpan(0, ownCritic.Length), otherActor, otherCritic);

        public void EncodeUpload(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic, ParameterUpload message) =>
            _inner.EncodeUpload(actor, critic, message);

        public bool TryWriteKeys(bool afterRejoin, HouseholdMessage message) => _inner.TryWriteKeys(afterRejoin, message);

        public bool TryReceive(CoordinatorMessage message, HouseholdMessage reply, out bool hasReply) =>
            _inner.TryReceive(message, reply, out hasReply);

        private static void Noisy(ref float[] buffer, ReadOnlySpan<float> clear, GaussianMechanism mechanism)
        {
            if (buffer.Length != clear.Length)
            {
                buffer = new float[clear.Length];
            }
            clear.CopyTo(buffer);
            mechanism.Apply(buffer);
        }
    }
}
