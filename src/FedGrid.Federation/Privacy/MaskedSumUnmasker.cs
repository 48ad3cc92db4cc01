using System.Security.Cryptography;

namespace FedGrid.Federation.Privacy;

/// <summary>How a masked sum ended.</summary>
public enum MaskedSumStatus
{
    /// <summary>Every household sent its vector: the masks cancelled by themselves.</summary>
    Complete,

    /// <summary>Some households dropped out; their keys were rebuilt from survivors' shares and their masks removed.</summary>
    Recovered,

    /// <summary>Fewer than the threshold survived (or the shares did not verify): no total, the round is abandoned.</summary>
    Abandoned,
}

/// <summary>The outcome of one masked sum (what the coordinator records for the step).</summary>
/// <param name="Status">How it ended.</param>
/// <param name="Survivors">Households whose masked vectors arrived.</param>
/// <param name="Dropped">Households whose vectors did not arrive.</param>
/// <param name="Threshold">t of the Shamir sharing.</param>
/// <param name="Reason">Why the round was abandoned (null otherwise).</param>
public readonly record struct MaskedSumResult(MaskedSumStatus Status, int Survivors, int Dropped, int Threshold, string? Reason)
{
    /// <summary>Whether a total was produced.</summary>
    public bool HasTotal => Status != MaskedSumStatus.Abandoned;
}

/// <summary>
/// The coordinator's side of masked sums: adds the masked vectors modulo 2^64; when households dropped out, rebuilds
/// each dropped household's private key from at least t survivors' Shamir shares (checked against its published public
/// key), regenerates its pair masks with every survivor and removes them, then decodes Σ_{survivors} x. With fewer
/// than t survivors (or shares that do not verify) it returns <see cref="MaskedSumStatus.Abandoned"/> and fills the
/// total with NaN: a round is never mis-summed.
/// <para>
/// A household whose key was rebuilt has its masks known to the coordinator from then on; its later vectors under
/// the same keys are refused (<see cref="Add"/> throws) — it must come back with a fresh key pair
/// (<see cref="Exclude"/> then <see cref="Replace"/>). An excluded household is neither expected nor masked with.
/// </para>
/// </summary>
public sealed class MaskedSumUnmasker : IDisposable
{
    private readonly byte[][] _publicKeys;
    private readonly bool[] _excluded;
    private readonly byte[] _sessionId;
    private readonly ulong[] _sum;
    private readonly ulong[] _scratch;
    private readonly bool[] _arrived;
    private readonly bool[] _absent;
    private readonly bool[] _revealed;
    private readonly Dictionary<(int Dropped, int Survivor), AesCtr> _recoveredPairs = [];
    private readonly List<int> _dropped = [];
    private MaskContext _context;
    private int _length = -1;
    private int _survivors;

    /// <summary>Creates the coordinator side.</summary>
    /// <param name="publicKeys">Every household's public key, by index.</param>
    /// <param name="sessionId">The key-agreement session the households used.</param>
    /// <param name="encoding">The shared fixed-point encoding.</param>
    /// <param name="threshold">t: survivors needed to recover dropouts (2 ≤ t ≤ n; Bonawitz et al. take t &gt; n/2).</param>
    /// <param name="maxLength">Longest vector.</param>
    public MaskedSumUnmasker(IReadOnlyList<byte[]> publicKeys, ReadOnlySpan<byte> sessionId, FixedPointEncoding encoding, int threshold, int maxLength)
    {
        ArgumentNullException.ThrowIfNull(publicKeys);
        ArgumentNullException.ThrowIfNull(encoding);
        if (publicKeys.Count < 2)
        {
            throw new ArgumentException("masked sums need at least two households", nameof(publicKeys));
        }
        if (publicKeys.Count > encoding.MaxParticipants)
        {
            throw new ArgumentException($"{publicKeys.Count} households exceed the encoding's overflow bound of {encoding.MaxParticipants} participants", nameof(publicKeys));
        }
        if (threshold < 2 || threshold > publicKeys.Count)
        {
            throw new ArgumentOutOfRangeException(nameof(threshold), threshold, $"threshold must be between 2 and the {publicKeys.Count} households");
        }
        ArgumentOutOfRangeException.ThrowIfNegative(maxLength);
        _publicKeys = [.. publicKeys];
        _excluded = new bool[publicKeys.Count];
        _sessionId = sessionId.ToArray();
        Encoding = encoding;
        Threshold = threshold;
        _sum = new ulong[maxLength];
        _scratch = new ulong[maxLength];
        _arrived = new bool[publicKeys.Count];
        _absent = new bool[publicKeys.Count];
        _revealed = new bool[publicKeys.Count];
    }

    /// <summary>t.</summary>
    public int Threshold { get; }

    /// <summary>Number of households n.</summary>
    public int HouseholdCount => _publicKeys.Length;

    /// <summary>The fixed-point encoding.</summary>
    public FixedPointEncoding Encoding { get; }

    /// <summary>Households whose vectors have not arrived in the current sum (valid after the last <see cref="Add"/>).</summary>
    public IReadOnlyList<int> Missing
    {
        get
        {
            _dropped.Clear();
            for (int k = 0; k < _arrived.Length; k++)
            {
                if (!_arrived[k] && !_excluded[k] && !_absent[k])
                {
                    _dropped.Add(k);
                }
            }
            return _dropped;
        }
    }

    /// <summary>Whether household k's key was rebuilt (its masks are known; it cannot take part again).</summary>
    /// <param name="household">k.</param>
    /// <returns>True once revealed.</returns>
    public bool IsRevealed(int household) => _revealed[household];

    /// <summary>Whether household k is out of the masks.</summary>
    /// <param name="household">k.</param>
    /// <returns>True when excluded.</returns>
    public bool IsExcluded(int household) => _excluded[household];

    /// <summary>Takes household k out of the sums and masks (the households were told to stop masking with it).</summary>
    /// <param name="household">k.</param>
    public void Exclude(int household)
    {
        _excluded[household] = true;
        _revealed[household] = false;
        foreach ((int d, int s) in _recoveredPairs.Keys.ToArray())
        {
            if (d == household || s == household)
            {
                _recoveredPairs[(d, s)].Dispose();
                _recoveredPairs.Remove((d, s));
            }
        }
    }

    /// <summary>Brings excluded household k back with its new public key.</summary>
    /// <param name="household">k.</param>
    /// <param name="publicKey">Its new public key.</param>
    /// <exception cref="InvalidOperationException">k is not excluded, or a revealed household is not excluded yet.</exception>
    public void Replace(int household, byte[] publicKey)
    {
        ArgumentNullException.ThrowIfNull(publicKey);
        if (!_excluded[household])
        {
            throw new InvalidOperationException($"household {household} must be excluded before it comes back with a new key");
        }
        for (int k = 0; k < _revealed.Length; k++)
        {
            if (_revealed[k])
            {
                throw new InvalidOperationException($"household {k}'s key was rebuilt and it is not excluded yet; exclude it before a household comes back");
            }
        }
        _publicKeys[household] = publicKey;
        _excluded[household] = false;
    }

    /// <summary>Starts a masked sum.</summary>
    /// <param name="context">Round, step and channel the households masked with.</param>
    /// <param name="length">Vector length.</param>
    public void Begin(MaskContext context, int length)
    {
        if (length < 0 || length > _sum.Length)
        {
            throw new ArgumentOutOfRangeException(nameof(length), length, $"vector length outside 0 … {_sum.Length}");
        }
        _context = context;
        _length = length;
        _survivors = 0;
        Array.Clear(_arrived);
        Array.Clear(_absent);
        Array.Clear(_sum);
    }

    /// <summary>
    /// Starts a masked sum among some households only (masked uploads: those called to train): the others neither
    /// send nor are masked with, so they are not missing.
    /// </summary>
    /// <param name="context">Round, step and channel the households masked with.</param>
    /// <param name="length">Vector length.</param>
    /// <param name="participants">One flag per household: whether it takes part in this sum.</param>
    public void Begin(MaskContext context, int length, ReadOnlySpan<bool> participants)
    {
        if (participants.Length != _arrived.Length)
        {
            throw new ArgumentException($"participant flags for {participants.Length} households; the sum has {_arrived.Length}", nameof(participants));
        }
        Begin(context, length);
        for (int k = 0; k < _absent.Length; k++)
        {
            _absent[k] = !participants[k];
        }
    }

    /// <summary>Adds household k's masked vector.</summary>
    /// <param name="household">k.</param>
    /// <param name="masked">Its masked residues.</param>
    /// <exception cref="InvalidOperationException">No sum begun, a duplicate, or a household whose key was revealed.</exception>
    public void Add(int household, ReadOnlySpan<ulong> masked)
    {
        if (_length < 0)
        {
            throw new InvalidOperationException("Begin a masked sum before adding vectors");
        }
        if (household < 0 || household >= _arrived.Length)
        {
            throw new ArgumentOutOfRangeException(nameof(household), household, "unknown household");
        }
        if (_revealed[household])
        {
            throw new InvalidOperationException($"household {household}'s key was rebuilt after a dropout; it must rejoin with fresh keys");
        }
        if (_excluded[household])
        {
            throw new InvalidOperationException($"household {household} is excluded from the masks");
        }
        if (_absent[household])
        {
            throw new InvalidOperationException($"household {household} does not take part in this sum");
        }
        if (_arrived[household])
        {
            throw new InvalidOperationException($"household {household} already sent this step's vector");
        }
        if (masked.Length != _length)
        {
            throw new ArgumentException($"household {household} sent {masked.Length} values; {_length} expected", nameof(masked));
        }
        _arrived[household] = true;
        _survivors++;
        FixedPointEncoding.AddWrapping(_sum.AsSpan(0, _length), masked);
    }

    /// <summary>Ends the sum: decodes the total of the survivors' values, recovering dropouts when needed.</summary>
    /// <param name="sharesOfDropped">For each dropped household, the shares of its private scalar the survivors
    /// returned (ignored when nobody dropped; may be null then).</param>
    /// <param name="total">Receives Σ_{survivors} x (same length as the vectors), or NaN when abandoned.</param>
    /// <returns>The outcome.</returns>
    public MaskedSumResult Complete(IReadOnlyDictionary<int, IReadOnlyList<ShamirShare>>? sharesOfDropped, Span<double> total)
    {
        if (_length < 0)
        {
            throw new InvalidOperationException("Begin a masked sum before completing it");
        }
        if (total.Length != _length)
        {
            throw new ArgumentException($"total of {total.Length} values for vectors of {_length}", nameof(total));
        }
        Span<ulong> sum = _sum.AsSpan(0, _length);
        int dropped = 0;
        for (int k = 0; k < _arrived.Length; k++)
        {
            dropped += _arrived[k] || _excluded[k] || _absent[k] ? 0 : 1;
        }
        MaskedSumResult result;
        if (dropped == 0)
        {
            result = new MaskedSumResult(MaskedSumStatus.Complete, _survivors, 0, Threshold, null);
        }
        else if (_survivors < Threshold)
        {
            result = Abandon(dropped, $"{_survivors} of {_arrived.Length} households survived; dropout recovery needs {Threshold}");
        }
        else
        {
            string? problem = RemoveDroppedMasks(sharesOfDropped, sum);
            result = problem is null
                ? new MaskedSumResult(MaskedSumStatus.Recovered, _survivors, dropped, Threshold, null)
                : Abandon(dropped, problem);
        }
        if (result.HasTotal)
        {
            Encoding.Decode(sum, total);
        }
        else
        {
            total.Fill(double.NaN);
        }
        _length = -1;
        return result;
    }

    /// <inheritdoc />
    public void Dispose()
    {
        foreach (AesCtr a in _recoveredPairs.Values)
        {
            a.Dispose();
        }
        _recoveredPairs.Clear();
    }

    private MaskedSumResult Abandon(int dropped, string reason) =>
        new(MaskedSumStatus.Abandoned, _survivors, dropped, Threshold, reason);

    private string? RemoveDroppedMasks(IReadOnlyDictionary<int, IReadOnlyList<ShamirShare>>? shares, Span<ulong> sum)
    {
        // First rebuild every dropped key (all or nothing), then touch the sum.
        for (int d = 0; d < _arrived.Length; d++)
        {
            if (_arrived[d] || _revealed[d] || _excluded[d] || _absent[d])
            {
                continue;
            }
            if (shares is null || !shares.TryGetValue(d, out IReadOnlyList<ShamirShare>? list) || list.Count < Threshold)
            {
                return $"fewer than {Threshold} shares of dropped household {d}'s key arrived";
            }
            int fromSurvivors = 0;
            foreach (ShamirShare s in list)
            {
                int holder = s.Index - 1;
                if (holder >= 0 && holder < _arrived.Length && _arrived[holder])
                {
                    fromSurvivors++;
                }
            }
            if (fromSurvivors < Threshold)
            {
                return $"fewer than {Threshold} of the shares of household {d}'s key come from survivors";
            }
            MaskingKeyPair rebuilt;
            try
            {
                byte[] scalar = ShamirSecretSharing.Combine(list, Threshold, MaskingKeyPair.PrivateScalarBytes);
                rebuilt = MaskingKeyPair.FromPrivateScalar(scalar, _publicKeys[d]);
                CryptographicOperations.ZeroMemory(scalar);
            }
            catch (Exception e) when (e is ArgumentException or CryptographicException)
            {
                return $"the shares of household {d}'s key do not verify against its public key ({e.Message})";
            }
            using (rebuilt)
            {
                for (int s = 0; s < _arrived.Length; s++)
                {
                    if (s != d && !_revealed[s] && !_excluded[s])
                    {
                        byte[] key = PairwiseMask.DeriveKey(rebuilt, _publicKeys[s], _sessionId, d, s);
                        _recoveredPairs[(d, s)] = new AesCtr(key);
                        CryptographicOperations.ZeroMemory(key);
                    }
                }
            }
            _revealed[d] = true;
        }
        // Survivor s's vector carries +mask(s,d) if s < d, −mask(d,s) otherwise: remove it by acting as d would.
        foreach (((int d, int s), AesCtr stream) in _recoveredPairs)
        {
            if (_arrived[s])
            {
                PairwiseMask.Apply(stream, _context, d, s, _scratch, sum);
            }
        }
        return null;
    }
}
