using FedGrid.Federation.Privacy;
using FedGrid.Grid.Numerics;

namespace FedGrid.Federation.Tests;

/// <summary>Seeded P-256 key pairs for deterministic masking tests.</summary>
internal static class PrivacyTestKeys
{
    public static MaskingKeyPair[] Households(int count, ulong seed)
    {
        var random = new SeededRandom(seed);
        var keys = new MaskingKeyPair[count];
        var d = new byte[MaskingKeyPair.PrivateScalarBytes];
        for (int k = 0; k < count; k++)
        {
            for (int b = 0; b < d.Length; b += 8)
            {
                BitConverter.TryWriteBytes(d.AsSpan(b, 8), random.NextUInt64());
            }
            d[0] &= 0x7f; // below the group order (≈ 2^256 − 2^224) with certainty
            keys[k] = MaskingKeyPair.FromPrivateScalar(d);
        }
        return keys;
    }

    public static byte[][] PublicKeys(MaskingKeyPair[] keys) => [.. keys.Select(k => k.PublicKey)];

    public static byte[] Session => "test session 1"u8.ToArray();
}
