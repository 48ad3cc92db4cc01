using System.Numerics;
using System.Security.Cryptography;

namespace FedGrid.Federation.Privacy;

/// <summary>One Shamir share: the point (x, f(x)) of the sharing polynomial, x ≥ 1.</summary>
/// <param name="Index">x, the holder's share index (household index + 1 by convention).</param>
/// <param name="Value">f(x) in GF(p), p = 2^521 − 1.</param>
public readonly record struct ShamirShare(int Index, BigInteger Value);

/// <summary>
/// Shamir t-of-n secret sharing (Shamir 1979) over the prime field GF(p), p = 2^521 − 1 (a Mersenne prime), large
/// enough to hold a 64-byte secret as one field element. A secret s is the constant term of a random polynomial of
/// degree t − 1 with coefficients drawn uniformly from GF(p) by a cryptographic generator; share i is f(i). Any t
/// shares give s back by Lagrange interpolation at 0; fewer than t reveal nothing about s — and also cannot be
/// told apart from a wrong answer, which is why <see cref="Combine"/> refuses them.
/// </summary>
public static class ShamirSecretSharing
{
    /// <summary>Largest secret in bytes (a 512-bit integer is below p).</summary>
    public const int MaxSecretBytes = 64;

    /// <summary>The field prime p = 2^521 − 1.</summary>
    public static BigInteger Prime { get; } = (BigInteger.One << 521) - 1;

    /// <summary>Splits a secret into <paramref name="shareCount"/> shares, any <paramref name="threshold"/> of which recover it.</summary>
    /// <param name="secret">The secret, read as a big-endian unsigned integer (at most 64 bytes).</param>
    /// <param name="shareCount">n, 1 … 65 535: shares get indices 1 … n.</param>
    /// <param name="threshold">t, 1 ≤ t ≤ n.</param>
    /// <param name="random">Source of the polynomial's coefficients (a fresh cryptographic generator when null).</param>
    /// <returns>The n shares.</returns>
    /// <exception cref="ArgumentException">Secret too long, or n, t out of range.</exception>
    public static ShamirShare[] Split(ReadOnlySpan<byte> secret, int shareCount, int threshold, RandomNumberGenerator? random = null)
    {
        if (secret.Length > MaxSecretBytes)
        {
            throw new ArgumentException($"Shamir secrets are at most {MaxSecretBytes} bytes; got {secret.Length}", nameof(secret));
        }
        if (shareCount is < 1 or > ushort.MaxValue)
        {
            throw new ArgumentOutOfRangeException(nameof(shareCount), shareCount, "share count must be between 1 and 65535");
        }
        if (threshold < 1 || threshold > shareCount)
        {
            throw new ArgumentOutOfRangeException(nameof(threshold), threshold, $"threshold must be between 1 and the share count {shareCount}");
        }
        RandomNumberGenerator rng = random ?? RandomNumberGenerator.Create();
        try
        {
            var coefficients = new BigInteger[threshold];
            coefficients[0] = new BigInteger(secret, isUnsigned: true, isBigEndian: true);
            for (int k = 1; k < threshold; k++)
            {
                coefficients[k] = UniformFieldElement(rng);
            }
            var shares = new ShamirShare[shareCount];
            for (int i = 0; i < shareCount; i++)
            {
                var x = new BigInteger(i + 1);
                BigInteger y = BigInteger.Zero;
                for (int k = threshold - 1; k >= 0; k--)
                {
                    y = (y * x + coefficients[k]) % Prime; // Horner
                }
                shares[i] = new ShamirShare(i + 1, y);
            }
            return shares;
        }
        finally
        {
            if (random is null)
            {
                rng.Dispose();
            }
        }
    }

    /// <summary>Recovers the secret from at least <paramref name="threshold"/> shares with distinct indices.</summary>
    /// <param name="shares">The shares (the first <paramref name="threshold"/> distinct ones are used).</param>
    /// <param name="threshold">t the secret was split with.</param>
    /// <param name="secretBytes">Length of the secret in bytes (left-padded with zeros).</param>
    /// <returns>The secret.</returns>
    /// <exception cref="ArgumentException">Fewer than t distinct shares, a share outside the field, or a recovered value
    /// longer than <paramref name="secretBytes"/> (inconsistent shares).</exception>
    public static byte[] Combine(IReadOnlyList<ShamirShare> shares, int threshold, int secretBytes)
    {
        ArgumentNullException.ThrowIfNull(shares);
        if (threshold < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(threshold), threshold, "threshold must be at least 1");
        }
        if (secretBytes is < 1 or > MaxSecretBytes)
        {
            throw new ArgumentOutOfRangeException(nameof(secretBytes), secretBytes, $"secret length must be 1 … {MaxSecretBytes} bytes");
        }
        var used = new List<ShamirShare>(threshold);
        foreach (ShamirShare s in shares)
        {
            if (s.Index < 1 || s.Value.Sign < 0 || s.Value >= Prime)
            {
                throw new ArgumentException($"share {s.Index} is not a point of GF(2^521 − 1) with index ≥ 1", nameof(shares));
            }
            if (used.Count < threshold && !used.Exists(u => u.Index == s.Index))
            {
                used.Add(s);
            }
        }
        if (used.Count < threshold)
        {
            throw new ArgumentException($"{used.Count} distinct shares cannot recover a {threshold}-of-n secret", nameof(shares));
        }
        BigInteger secret = BigInteger.Zero;
        for (int i = 0; i < used.Count; i++)
        {
            BigInteger numerator = BigInteger.One, denominator = BigInteger.One;
            for (int j = 0; j < used.Count; j++)
            {
                if (j == i)
                {
                    continue;
                }
                numerator = numerator * used[j].Index % Prime;
                denominator = denominator * Mod(used[j].Index - used[i].Index) % Prime;
            }
            BigInteger lagrange = numerator * BigInteger.ModPow(denominator, Prime - 2, Prime) % Prime;
            secret = (secret + used[i].Value * lagrange) % Prime;
        }
        byte[] raw = secret.ToByteArray(isUnsigned: true, isBigEndian: true);
        if (raw.Length > secretBytes)
        {
            throw new ArgumentException($"the shares interpolate to a value longer than {secretBytes} bytes: they do not belong to one sharing", nameof(shares));
        }
        var result = new byte[secretBytes];
        raw.CopyTo(result, secretBytes - raw.Length);
        return result;
    }

    private static BigInteger Mod(BigInteger a)
    {
        BigInteger r = a % Prime;
        return r.Sign < 0 ? r + Prime : r;
    }

    private static BigInteger UniformFieldElement(RandomNumberGenerator rng)
    {
        Span<byte> bytes = stackalloc byte[66]; // 528 bits; keep 521 and reject values ≥ p (rejection sampling: uniform)
        while (true)
        {
            rng.GetBytes(bytes);
            bytes[0] &= 0x01;
            var value = new BigInteger(bytes, isUnsigned: true, isBigEndian: true);
            if (value < Prime)
            {
                return value;
            }
        }
    }
}
