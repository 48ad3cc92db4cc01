using System.Buffers.Binary;
using System.Numerics;
using System.Security.Cryptography;
using FedGrid.Federation.Schemes;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// Encrypts one Shamir share of a household's mask key for one peer, so that the coordinator can relay it without
/// reading it (Bonawitz et al. 2017, round 1). Key: P-256 Diffie–Hellman between the two households' share keys, then
/// HKDF-SHA256 with the session as salt and info = "FedGrid key share v1" ‖ owner ‖ holder (big-endian 32-bit), so each
/// direction of a pair has its own key and each key encrypts one share: AES-256-GCM with a zero nonce, associated data
/// owner ‖ holder. Plaintext: the share value f(holder + 1) in GF(2^521 − 1), 66 bytes big-endian.
/// </summary>
public static class KeyShareCipher
{
    /// <summary>Bytes of a share value.</summary>
    public const int ValueBytes = 66;

    /// <summary>Bytes of the GCM tag.</summary>
    public const int TagBytes = 16;

    /// <summary>Bytes of a ciphertext.</summary>
    public const int CiphertextBytes = ValueBytes + TagBytes;

    private static ReadOnlySpan<byte> Label => "FedGrid key share v1"u8;

    /// <summary>Encrypts a share value from its owner to its holder.</summary>
    /// <param name="ownerShareKeys">The owner's share-key pair.</param>
    /// <param name="holderShareKey">The holder's share public key.</param>
    /// <param name="sessionId">Key-agreement session.</param>
    /// <param name="owner">Owner index.</param>
    /// <param name="holder">Holder index.</param>
    /// <param name="value">f(holder + 1).</param>
    /// <returns>Ciphertext ‖ tag.</returns>
    public static byte[] Encrypt(MaskingKeyPair ownerShareKeys, ReadOnlySpan<byte> holderShareKey, ReadOnlySpan<byte> sessionId, int owner, int holder, BigInteger value)
    {
        var result = new byte[CiphertextBytes];
        Span<byte> plain = stackalloc byte[ValueBytes];
        WriteValue(value, plain);
        byte[] key = PairwiseMask.Agree(ownerShareKeys, holderShareKey, sessionId, Label, owner, holder);
        try
        {
            using var gcm = new AesGcm(key, TagBytes);
            Span<byte> aad = stackalloc byte[8];
            Aad(owner, holder, aad);
            gcm.Encrypt(stackalloc byte[12], plain, result.AsSpan(0, ValueBytes), result.AsSpan(ValueBytes), aad);
        }
        finally
        {
            CryptographicOperations.ZeroMemory(key);
            CryptographicOperations.ZeroMemory(plain);
        }
        return result;
    }

    /// <summary>Decrypts a share value at its holder.</summary>
    /// <param name="holderShareKeys">The holder's share-key pair.</param>
    /// <param name="ownerShareKey">The owner's share public key.</param>
    /// <param name="sessionId">Key-agreement session.</param>
    /// <param name="owner">Owner index.</param>
    /// <param name="holder">Holder index.</param>
    /// <param name="ciphertext">Ciphertext ‖ tag.</param>
    /// <returns>f(holder + 1).</returns>
    /// <exception cref="ProtocolException">Wrong length or the tag does not verify.</exception>
    public static BigInteger Decrypt(MaskingKeyPair holderShareKeys, ReadOnlySpan<byte> ownerShareKey, ReadOnlySpan<byte> sessionId, int owner, int holder, ReadOnlySpan<byte> ciphertext)
    {
        if (ciphertext.Length != CiphertextBytes)
        {
            throw new ProtocolException($"masked sums: the key share of household {owner} for {holder} is {ciphertext.Length} bytes; {CiphertextBytes} expected");
        }
        byte[] key = PairwiseMask.Agree(holderShareKeys, ownerShareKey, sessionId, Label, owner, holder);
        Span<byte> plain = stackalloc byte[ValueBytes];
        try
        {
            using var gcm = new AesGcm(key, TagBytes);
            Span<byte> aad = stackalloc byte[8];
            Aad(owner, holder, aad);
            gcm.Decrypt(stackalloc byte[12], ciphertext[..ValueBytes], ciphertext[ValueBytes..], plain, aad);
            return new BigInteger(plain, isUnsigned: true, isBigEndian: true);
        }
        catch (CryptographicException e)
        {
            throw new ProtocolException($"masked sums: the key share of household {owner} for {holder} does not decrypt ({e.Message})");
        }
        finally
        {
            CryptographicOperations.ZeroMemory(key);
            CryptographicOperations.ZeroMemory(plain);
        }
    }

    /// <summary>Writes a share value as 66 bytes big-endian.</summary>
    /// <param name="value">0 ≤ value &lt; 2^528.</param>
    /// <param name="destination">66 bytes.</param>
    public static void WriteValue(BigInteger value, Span<byte> destination)
    {
        destination.Clear();
        int n = value.GetByteCount(isUnsigned: true);
        if (value.Sign < 0 || n > destination.Length || !value.TryWriteBytes(destination[(destination.Length - n)..], out _, isUnsigned: true, isBigEndian: true))
        {
            throw new ArgumentOutOfRangeException(nameof(value), "share value outside 0 … 2^528 − 1");
        }
    }

    private static void Aad(int owner, int holder, Span<byte> aad)
    {
        BinaryPrimitives.WriteInt32BigEndian(aad, owner);
        BinaryPrimitives.WriteInt32BigEndian(aad[4..], holder);
    }
}
