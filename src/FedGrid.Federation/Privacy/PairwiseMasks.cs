using System.Buffers.Binary;
using System.Runtime.InteropServices;
using System.Security.Cryptography;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// Where one mask stream belongs: the round, the decision step inside it and a channel (e.g. 0 = actor partial sums,
/// 1 = critic partial sums, 2 = uploads). Every context gives an independent keystream of the same pair key, because
/// the context is the counter nonce: T_0 = round ‖ step ‖ channel ‖ 0 (four big-endian 32-bit words), and the last
/// word counts the 16-byte blocks of one vector.
/// </summary>
/// <param name="Round">Round, 0 … 2^32 − 1.</param>
/// <param name="Step">Decision step, 0 … 2^32 − 1.</param>
/// <param name="Channel">Channel, 0 … 2^32 − 1.</param>
public readonly record struct MaskContext(long Round, long Step, long Channel)
{
    internal void WriteCounter(Span<byte> counter)
    {
        BinaryPrimitives.WriteUInt32BigEndian(counter, Word(Round, nameof(Round)));
        BinaryPrimitives.WriteUInt32BigEndian(counter[4..], Word(Step, nameof(Step)));
        BinaryPrimitives.WriteUInt32BigEndian(counter[8..], Word(Channel, nameof(Channel)));
        BinaryPrimitives.WriteUInt32BigEndian(counter[12..], 0);
    }

    private static uint Word(long value, string name) => value is >= 0 and <= uint.MaxValue
        ? (uint)value
        : throw new ArgumentOutOfRangeException(name, value, "mask context words are 0 … 2^32 − 1");
}

/// <summary>
/// A household's key pair for pairwise masks: elliptic-curve Diffie–Hellman on NIST P-256. The public key (SEC 1
/// uncompressed point, 65 bytes) goes to every other household through the coordinator; the private scalar (32 bytes)
/// never leaves the household except as Shamir shares (<see cref="SharePrivateScalar"/>), one per other household,
/// so that the survivors of a round can let the coordinator remove a dropped household's masks.
/// </summary>
public sealed class MaskingKeyPair : IDisposable
{
    /// <summary>Length of a public key: 0x04 ‖ X ‖ Y.</summary>
    public const int PublicKeyBytes = 65;

    /// <summary>Length of the private scalar.</summary>
    public const int PrivateScalarBytes = 32;

    private MaskingKeyPair(ECDiffieHellman key)
    {
        Key = key;
        ECParameters p = key.ExportParameters(false);
        PublicKey = EncodePoint(p.Q);
    }

    /// <summary>The public key, SEC 1 uncompressed (65 bytes).</summary>
    public byte[] PublicKey { get; }

    internal ECDiffieHellman Key { get; }

    /// <summary>Generates a fresh key pair (operating-system randomness).</summary>
    /// <returns>The key pair.</returns>
    public static MaskingKeyPair Generate() => new(ECDiffieHellman.Create(ECCurve.NamedCurves.nistP256));

    /// <summary>Rebuilds a key pair from its private scalar and checks it against the published public key.</summary>
    /// <param name="privateScalar">d, 32 bytes big-endian.</param>
    /// <param name="expectedPublicKey">The public key the household published.</param>
    /// <returns>The key pair.</returns>
    /// <exception cref="CryptographicException">d is not a valid scalar or does not belong to the public key.</exception>
    public static MaskingKeyPair FromPrivateScalar(ReadOnlySpan<byte> privateScalar, ReadOnlySpan<byte> expectedPublicKey)
    {
        MaskingKeyPair pair = FromPrivateScalar(privateScalar);
        if (!CryptographicOperations.FixedTimeEquals(pair.PublicKey, expectedPublicKey))
        {
            pair.Dispose();
            throw new CryptographicException("the recovered private scalar does not belong to the published public key");
        }
        return pair;
    }

    /// <summary>
    /// Builds a key pair from a private scalar (the public key is derived from it). Used to rebuild a dropped
    /// household's key, and by simulations that draw keys from a seeded stream for reproducible transcripts.
    /// </summary>
    /// <param name="privateScalar">d, 32 bytes big-endian, 1 ≤ d &lt; the P-256 group order.</param>
    /// <returns>The key pair.</returns>
    /// <exception cref="CryptographicException">d is not a valid P-256 scalar.</exception>
    public static MaskingKeyPair FromPrivateScalar(ReadOnlySpan<byte> privateScalar)
    {
        if (privateScalar.Length != PrivateScalarBytes)
        {
            throw new CryptographicException($"P-256 private scalars are {PrivateScalarBytes} bytes; got {privateScalar.Length}");
        }
        var key = ECDiffieHellman.Create();
        try
        {
            key.ImportParameters(new ECParameters { Curve = ECCurve.NamedCurves.nistP256, D = privateScalar.ToArray() });
            return new MaskingKeyPair(key);
        }
        catch
        {
            key.Dispose();
            throw;
        }
    }

    /// <summary>Exports the private scalar d (32 bytes). Handle like the key itself.</summary>
    /// <returns>d.</returns>
    public byte[] ExportPrivateScalar() => Key.ExportParameters(true).D!;

    /// <summary>Splits the private scalar into Shamir shares, share index = household index + 1.</summary>
    /// <param name="households">n.</param>
    /// <param name="threshold">t.</param>
    /// <param name="random">Coefficient source (a fresh cryptographic generator when null).</param>
    /// <returns>n shares; share k goes (encrypted, in a deployment) to household k.</returns>
    public ShamirShare[] SharePrivateScalar(int households, int threshold, RandomNumberGenerator? random = null)
    {
        byte[] d = ExportPrivateScalar();
        try
        {
            return ShamirSecretSharing.Split(d, households, threshold, random);
        }
        finally
        {
            CryptographicOperations.ZeroMemory(d);
        }
    }

    /// <inheritdoc />
    public void Dispose() => Key.Dispose();

    internal static ECDiffieHellmanPublicKey ImportPublic(ReadOnlySpan<byte> publicKey, out ECDiffieHellman holder)
    {
        if (publicKey.Length != PublicKeyBytes || publicKey[0] != 0x04)
        {
            throw new CryptographicException($"a P-256 public key is 65 bytes starting 0x04 (SEC 1 uncompressed); got {publicKey.Length} bytes");
        }
        holder = ECDiffieHellman.Create();
        holder.ImportParameters(new ECParameters
        {
            Curve = ECCurve.NamedCurves.nistP256,
            Q = new ECPoint { X = publicKey[1..33].ToArray(), Y = publicKey[33..65].ToArray() },
        });
        return holder.PublicKey;
    }

    private static byte[] EncodePoint(ECPoint q)
    {
        var bytes = new byte[PublicKeyBytes];
        bytes[0] = 0x04;
        q.X!.CopyTo(bytes, 1);
        q.Y!.CopyTo(bytes, 33);
        return bytes;
    }
}

/// <summary>
/// The mask stream of one pair of households (Bonawitz et al. 2017). The pair seed is the P-256 Diffie–Hellman
/// shared secret (x-coordinate); HKDF-SHA256 (RFC 5869) extracts with the session identifier as salt and expands with
/// info = "FedGrid pairwise mask v1" ‖ lower index ‖ higher index (big-endian 32-bit) into an AES-256 key; AES-CTR
/// with the <see cref="MaskContext"/> as counter nonce expands it into 64-bit words, read little-endian. The lower
/// index adds the words, the higher subtracts them, so every pair cancels in the sum modulo 2^64.
/// </summary>
public static class PairwiseMask
{
    /// <summary>The fixed part of the HKDF info.</summary>
    public static ReadOnlySpan<byte> InfoLabel => "FedGrid pairwise mask v1"u8;

    /// <summary>Derives the AES-256 key of the pair (i, j) from one side's private key and the other's public key.</summary>
    /// <param name="own">This side's key pair.</param>
    /// <param name="peerPublicKey">The other side's public key.</param>
    /// <param name="sessionId">Key-agreement session (HKDF salt; fresh per set of key pairs).</param>
    /// <param name="i">One household index.</param>
    /// <param name="j">The other household index (≠ i).</param>
    /// <returns>32-byte key, the same from both sides.</returns>
    public static byte[] DeriveKey(MaskingKeyPair own, ReadOnlySpan<byte> peerPublicKey, ReadOnlySpan<byte> sessionId, int i, int j) =>
        Agree(own, peerPublicKey, sessionId, InfoLabel, Math.Min(i, j), Math.Max(i, j));

    /// <summary>
    /// P-256 Diffie–Hellman between <paramref name="own"/> and a peer's public key, then HKDF-SHA256 (RFC 5869) with the
    /// session as salt and info = <paramref name="label"/> ‖ first ‖ second (big-endian 32-bit) into a 32-byte key.
    /// </summary>
    /// <param name="own">This side's key pair.</param>
    /// <param name="peerPublicKey">The other side's public key.</param>
    /// <param name="sessionId">HKDF salt.</param>
    /// <param name="label">What the key is for.</param>
    /// <param name="first">First household index of the info.</param>
    /// <param name="second">Second household index (≠ first).</param>
    /// <returns>32-byte key.</returns>
    internal static byte[] Agree(MaskingKeyPair own, ReadOnlySpan<byte> peerPublicKey, ReadOnlySpan<byte> sessionId, ReadOnlySpan<byte> label, int first, int second)
    {
        ArgumentNullException.ThrowIfNull(own);
        if (first == second || first < 0 || second < 0)
        {
            throw new ArgumentException($"a key pair agreement needs two distinct non-negative households; got {first} and {second}");
        }
        ECDiffieHellmanPublicKey peer = MaskingKeyPair.ImportPublic(peerPublicKey, out ECDiffieHellman holder);
        try
        {
            byte[] shared = own.Key.DeriveRawSecretAgreement(peer);
            Span<byte> info = stackalloc byte[label.Length + 8];
            label.CopyTo(info);
            BinaryPrimitives.WriteInt32BigEndian(info[label.Length..], first);
            BinaryPrimitives.WriteInt32BigEndian(info[(label.Length + 4)..], second);
            var key = new byte[32];
            Span<byte> prk = stackalloc byte[32];
            HKDF.Extract(HashAlgorithmName.SHA256, shared, sessionId, prk);
            HKDF.Expand(HashAlgorithmName.SHA256, prk, key, info);
            CryptographicOperations.ZeroMemory(shared);
            CryptographicOperations.ZeroMemory(prk);
            return key;
        }
        finally
        {
            peer.Dispose();
            holder.Dispose();
        }
    }

    /// <summary>Writes the pair's mask words for a context into <paramref name="words"/>.</summary>
    /// <param name="stream">The pair's AES-CTR generator (keyed with <see cref="DeriveKey"/>).</param>
    /// <param name="context">Round, step and channel.</param>
    /// <param name="words">Receives the mask (at most 2^33 words).</param>
    public static void Generate(AesCtr stream, MaskContext context, Span<ulong> words)
    {
        ArgumentNullException.ThrowIfNull(stream);
        Span<byte> counter = stackalloc byte[16];
        context.WriteCounter(counter);
        stream.Keystream(counter, MemoryMarshal.AsBytes(words));
        if (!BitConverter.IsLittleEndian)
        {
            for (int k = 0; k < words.Length; k++)
            {
                words[k] = BinaryPrimitives.ReverseEndianness(words[k]);
            }
        }
    }

    /// <summary>Applies the pair mask of (self, peer) to a vector: added when self &lt; peer, subtracted otherwise.</summary>
    /// <param name="stream">The pair's generator.</param>
    /// <param name="context">Round, step and channel.</param>
    /// <param name="self">The household whose vector it is.</param>
    /// <param name="peer">The other household of the pair.</param>
    /// <param name="scratch">Caller-owned buffer of the vector's length.</param>
    /// <param name="vector">The vector, updated in place modulo 2^64.</param>
    public static void Apply(AesCtr stream, MaskContext context, int self, int peer, Span<ulong> scratch, Span<ulong> vector)
    {
        Span<ulong> mask = scratch[..vector.Length];
        Generate(stream, context, mask);
        if (self < peer)
        {
            FixedPointEncoding.AddWrapping(vector, mask);
        }
        else
        {
            FixedPointEncoding.SubtractWrapping(vector, mask);
        }
    }
}

/// <summary>
/// Household m's side of masked sums: masked = encode(x) + Σ_{k&gt;m} mask(m,k) − Σ_{k&lt;m} mask(k,m) (mod 2^64), over
/// the households k that take part (not excluded). The pair keys are agreed in the constructor, and again for one peer
/// when it comes back with new keys (<see cref="Replace"/>); each masking call allocates nothing.
/// </summary>
public sealed class PairwiseMasker : IDisposable
{
    private readonly AesCtr?[] _pairs;
    private ulong[] _scratch;
    private readonly MaskingKeyPair _keys;
    private readonly byte[] _sessionId;

    /// <summary>Agrees a key with every other household.</summary>
    /// <param name="household">m.</param>
    /// <param name="keys">m's key pair.</param>
    /// <param name="publicKeys">Every household's public key, by index (m's own included); null for a household that does not take part.</param>
    /// <param name="sessionId">Key-agreement session (HKDF salt).</param>
    /// <param name="encoding">The fixed-point encoding shared by all households.</param>
    /// <param name="maxLength">Longest vector masked.</param>
    public PairwiseMasker(int household, MaskingKeyPair keys, IReadOnlyList<byte[]?> publicKeys, ReadOnlySpan<byte> sessionId, FixedPointEncoding encoding, int maxLength)
    {
        ArgumentNullException.ThrowIfNull(keys);
        ArgumentNullException.ThrowIfNull(publicKeys);
        ArgumentNullException.ThrowIfNull(encoding);
        if (household < 0 || household >= publicKeys.Count)
        {
            throw new ArgumentOutOfRangeException(nameof(household), household, $"household index outside 0 … {publicKeys.Count - 1}");
        }
        if (publicKeys.Count > encoding.MaxParticipants)
        {
            throw new ArgumentException($"{publicKeys.Count} households exceed the encoding's overflow bound of {encoding.MaxParticipants} participants", nameof(publicKeys));
        }
        if (publicKeys[household] is not { } ownKey || !CryptographicOperations.FixedTimeEquals(ownKey, keys.PublicKey))
        {
            throw new ArgumentException($"public key {household} is not this household's own", nameof(publicKeys));
        }
        ArgumentOutOfRangeException.ThrowIfNegative(maxLength);
        Household = household;
        Encoding = encoding;
        _keys = keys;
        _sessionId = sessionId.ToArray();
        _scratch = new ulong[maxLength];
        _pairs = new AesCtr?[publicKeys.Count];
        for (int k = 0; k < publicKeys.Count; k++)
        {
            if (k != household && publicKeys[k] is { } peer)
            {
                Replace(k, peer);
            }
        }
    }

    /// <summary>Takes household k out of the masks (it no longer takes part).</summary>
    /// <param name="peer">k.</param>
    public void Exclude(int peer)
    {
        _pairs[peer]?.Dispose();
        _pairs[peer] = null;
    }

    /// <summary>Agrees a new pair key with household k (it came back with a new public key).</summary>
    /// <param name="peer">k (≠ m).</param>
    /// <param name="publicKey">Its new public key.</param>
    public void Replace(int peer, ReadOnlySpan<byte> publicKey)
    {
        byte[] key = PairwiseMask.DeriveKey(_keys, publicKey, _sessionId, Household, peer);
        Exclude(peer);
        _pairs[peer] = new AesCtr(key);
        CryptographicOperations.ZeroMemory(key);
    }

    /// <summary>Whether household k takes part in the masks.</summary>
    /// <param name="peer">k.</param>
    /// <returns>True when a pair key is agreed with it.</returns>
    public bool Includes(int peer) => _pairs[peer] is not null;

    /// <summary>m.</summary>
    public int Household { get; }

    /// <summary>Number of households n.</summary>
    public int HouseholdCount => _pairs.Length;

    /// <summary>The fixed-point encoding.</summary>
    public FixedPointEncoding Encoding { get; }

    /// <summary>Encodes and masks single-precision values.</summary>
    /// <param name="context">Round, step and channel (each context used once per household).</param>
    /// <param name="values">x (each |x_i| within the encoding's bound).</param>
    /// <param name="masked">Receives the masked residues (same length).</param>
    public void Mask(MaskContext context, ReadOnlySpan<float> values, Span<ulong> masked)
    {
        CheckLength(values.Length, masked.Length);
        Encoding.Encode(values, masked);
        AddMasks(context, masked);
    }

    /// <summary>Encodes and masks double-precision values.</summary>
    /// <param name="context">Round, step and channel (each context used once per household).</param>
    /// <param name="values">x (each |x_i| within the encoding's bound).</param>
    /// <param name="masked">Receives the masked residues (same length).</param>
    public void Mask(MaskContext context, ReadOnlySpan<double> values, Span<ulong> masked)
    {
        CheckLength(values.Length, masked.Length);
        Encoding.Encode(values, masked);
        AddMasks(context, masked);
    }

    /// <summary>
    /// Adds the masks of the pairs (m, k) to words already encoded (with an encoding of the caller's, e.g. the uploads'
    /// wider bound), for the peers k that <paramref name="participants"/> marks only (masked uploads: the households
    /// called to train in the round).
    /// </summary>
    /// <param name="context">Round, step and channel (each context used once per household).</param>
    /// <param name="encoded">Fixed-point words, masked in place modulo 2^64.</param>
    /// <param name="participants">One flag per household: whether its pair mask is applied (m's own flag must be set).</param>
    public void AddMasks(MaskContext context, Span<ulong> encoded, ReadOnlySpan<bool> participants)
    {
        if (encoded.Length > _scratch.Length)
        {
            throw new ArgumentException($"vector of {encoded.Length} values is longer than the masker's {_scratch.Length}; call Reserve first");
        }
        if (participants.Length != _pairs.Length || !participants[Household])
        {
            throw new ArgumentException($"participant flags for {participants.Length} households must include household {Household} of {_pairs.Length}", nameof(participants));
        }
        AddMasks(context, encoded, participants, everyone: false);
    }

    /// <summary>Makes room for vectors of <paramref name="maxLength"/> values (allocates once when longer than before).</summary>
    /// <param name="maxLength">Longest vector to be masked.</param>
    public void Reserve(int maxLength)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(maxLength);
        if (maxLength > _scratch.Length)
        {
            _scratch = new ulong[maxLength];
        }
    }

    /// <inheritdoc />
    public void Dispose()
    {
        foreach (AesCtr? p in _pairs)
        {
            p?.Dispose();
        }
    }

    private void AddMasks(MaskContext context, Span<ulong> vector) => AddMasks(context, vector, default, everyone: true);

    /// <summary>Adds the masks of every agreed pair (m, k), of the peers <paramref name="participants"/> marks only unless <paramref name="everyone"/>.</summary>
    private void AddMasks(MaskContext context, Span<ulong> vector, ReadOnlySpan<bool> participants, bool everyone)
    {
        for (int k = 0; k < _pairs.Length; k++)
        {
            if ((everyone || participants[k]) && _pairs[k] is { } stream)
            {
                PairwiseMask.Apply(stream, context, Household, k, _scratch, vector);
            }
        }
    }

    private void CheckLength(int values, int masked)
    {
        if (values != masked)
        {
            throw new ArgumentException($"masking {values} values into {masked} slots");
        }
        if (values > _scratch.Length)
        {
            throw new ArgumentException($"vector of {values} values is longer than the masker's {_scratch.Length}");
        }
    }
}
