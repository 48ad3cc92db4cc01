using System.Security.Cryptography;
using FedGrid.Federation.Privacy;

namespace FedGrid.Federation.Tests;

/// <summary>AES-CTR against NIST SP 800-38A and HKDF-SHA256 against RFC 5869.</summary>
public sealed class PrivacyVectorTests
{
    // NIST SP 800-38A (2001), Appendix F.5: the four plaintext blocks shared by every CTR example, and T_1.
    // Typed from memory, cross-checked: ciphertext = plaintext ⊕ output block for every block.
    private const string Plaintext =
        "6bc1bee22e409f96e93d7e117393172a" + "ae2d8a571e03ac9c9eb76fac45af8e51" +
        "30c81c46a35ce411e5fbc1191a0a52ef" + "f69f2445df4f9b17ad2b417be66c3710";

    private const string InitialCounter = "f0f1f2f3f4f5f6f7f8f9fafbfcfdfeff";

    public static TheoryData<string, string, string, string> Sp80038A => new()
    {
        {
            // F.5.1 CTR-AES128.Encrypt
            "F.5.1",
            "2b7e151628aed2a6abf7158809cf4f3c",
            "ec8cdf7398607cb0f2d21675ea9ea1e4" + "362b7c3c6773516318a077d7fc5073ae" +
            "6a2cc3787889374fbeb4c81b17ba6c44" + "e89c399ff0f198c6d40a31db156cabfe",
            "874d6191b620e3261bef6864990db6ce" + "9806f66b7970fdff8617187bb9fffdff" +
            "5ae4df3edbd5d35e5b4f09020db03eab" + "1e031dda2fbe03d1792170a0f3009cee"
        },
        {
            // F.5.5 CTR-AES256.Encrypt
            "F.5.5",
            "603deb1015ca71be2b73aef0857d77811f352c073b6108d72d9810a30914dff4",
            "0bdf7df1591716335e9a8b15c860c502" + "5a6e699d536119065433863c8f657b94" +
            "1bc12c9c01610d5d0d8bd6a3378eca62" + "2956e1c8693536b1bee99c73a31576b6",
            "601ec313775789a5b7a7f504bbf3d228" + "f443e3ca4d62b59aca84e990cacaf5c5" +
            "2b0930daa23de94ce87017ba2d84988d" + "dfc9c58db67aada613c2dd08457941a6"
        },
    };

    [Theory]
    [MemberData(nameof(Sp80038A))]
    public void AesCtrMatchesSp80038A(string example, string key, string outputBlocks, string ciphertext)
    {
        using var ctr = new AesCtr(Convert.FromHexString(key));
        byte[] counter = Convert.FromHexString(InitialCounter);
        var stream = new byte[64];
        ctr.Keystream(counter, stream);
        Assert.True(Convert.ToHexStringLower(stream) == outputBlocks, $"SP 800-38A {example} output blocks");
        var cipher = new byte[64];
        ctr.Transform(counter, Convert.FromHexString(Plaintext), cipher);
        Assert.True(Convert.ToHexStringLower(cipher) == ciphertext, $"SP 800-38A {example} ciphertext");
        // CTR decryption is the same operation (SP 800-38A §6.5).
        var back = new byte[64];
        ctr.Transform(counter, cipher, back);
        Assert.Equal(Plaintext, Convert.ToHexStringLower(back));
    }

    [Fact]
    public void AesCtrPartialFinalBlockIsTruncatedKeystream()
    {
        using var ctr = new AesCtr(Convert.FromHexString("2b7e151628aed2a6abf7158809cf4f3c"));
        var stream = new byte[37];
        ctr.Keystream(Convert.FromHexString(InitialCounter), stream);
        Assert.Equal("ec8cdf7398607cb0f2d21675ea9ea1e4362b7c3c6773516318a077d7fc5073ae6a2cc37878", Convert.ToHexStringLower(stream));
    }

    [Fact]
    public void CounterIncrementIsBigEndianOver128Bits()
    {
        byte[] c = Convert.FromHexString("0000000000000000ffffffffffffffff");
        AesCtr.Increment(c);
        Assert.Equal("00000000000000010000000000000000", Convert.ToHexStringLower(c));
        c = Convert.FromHexString("ffffffffffffffffffffffffffffffff");
        AesCtr.Increment(c);
        Assert.Equal("00000000000000000000000000000000", Convert.ToHexStringLower(c));
        c = Convert.FromHexString(InitialCounter);
        AesCtr.Increment(c);
        Assert.Equal("f0f1f2f3f4f5f6f7f8f9fafbfcfdff00", Convert.ToHexStringLower(c));
    }

    [Fact]
    public void LongKeystreamEqualsBlockByBlockEncryptionAcrossBatchesAndCarries()
    {
        byte[] key = Convert.FromHexString("603deb1015ca71be2b73aef0857d77811f352c073b6108d72d9810a30914dff4");
        using var ctr = new AesCtr(key);
        // Start three blocks before a carry out of the low 64 bits; run past several batches.
        byte[] t0 = Convert.FromHexString("0102030405060708fffffffffffffffd");
        int blocks = 3 * AesCtr.BatchBlocks + 5;
        var stream = new byte[blocks * 16];
        ctr.Keystream(t0, stream);
        using var aes = Aes.Create();
        aes.Key = key;
        byte[] t = (byte[])t0.Clone();
        var expected = new byte[16];
        for (int b = 0; b < blocks; b++)
        {
            aes.EncryptEcb(t, expected, PaddingMode.None);
            Assert.True(expected.AsSpan().SequenceEqual(stream.AsSpan(b * 16, 16)), $"block {b}");
            AesCtr.Increment(t);
        }
    }

    [Fact]
    public void AesCtrRejectsBadKeysAndCounters()
    {
        Assert.Throws<ArgumentException>(() => new AesCtr(new byte[15]));
        using var ctr = new AesCtr(new byte[16]);
        Assert.Throws<ArgumentException>(() => ctr.Keystream(new byte[12], new byte[16]));
    }

    public static TheoryData<string, string, string, string, int, string, string> Rfc5869 => new()
    {
        // RFC 5869 Appendix A.1 – A.3 (SHA-256), from memory; cross-checked with an HMAC-SHA256 HKDF written
        // independently in Python's hmac module.
        {
            "A.1", "0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b", "000102030405060708090a0b0c", "f0f1f2f3f4f5f6f7f8f9", 42,
            "077709362c2e32df0ddc3f0dc47bba6390b6c73bb50f9c3122ec844ad7c2b3e5",
            "3cb25f25faacd57a90434f64d0362f2a2d2d0a90cf1a5a4c5db02d56ecc4c5bf34007208d5b887185865"
        },
        {
            "A.2",
            Range(0x00, 0x50), Range(0x60, 0xb0), Range(0xb0, 0x100), 82,
            "06a6b88c5853361a06104c9ceb35b45cef760014904671014a193f40c15fc244",
            "b11e398dc80327a1c8e7f78c596a49344f012eda2d4efad8a050cc4c19afa97c59045a99cac7827271cb41c65e590e09da3275600c2f09b8367793a9aca3db71cc30c58179ec3e87c14c01d5c1f3434f1d87"
        },
        {
            "A.3", "0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b0b", "", "", 42,
            "19ef24a32c717b167f33a91d6f648bdf96596776afdb6377ac434c1c293ccb04",
            "8da4e775a563c18f715f802a063c5a31b8a11f5c5ee1879ec3454e5f3c738d2d9d201395faa4b61a96c8"
        },
    };

    [Theory]
    [MemberData(nameof(Rfc5869))]
    public void HkdfSha256MatchesRfc5869(string testCase, string ikm, string salt, string info, int length, string prk, string okm)
    {
        // The pair-key derivation (PairwiseMask.DeriveKey) runs exactly this Extract-then-Expand.
        var actualPrk = new byte[32];
        HKDF.Extract(HashAlgorithmName.SHA256, Convert.FromHexString(ikm), Convert.FromHexString(salt), actualPrk);
        Assert.True(Convert.ToHexStringLower(actualPrk) == prk, $"RFC 5869 {testCase} PRK");
        var actualOkm = new byte[length];
        HKDF.Expand(HashAlgorithmName.SHA256, actualPrk, actualOkm, Convert.FromHexString(info));
        Assert.True(Convert.ToHexStringLower(actualOkm) == okm, $"RFC 5869 {testCase} OKM");
    }

    private static string Range(int from, int to)
    {
        var b = new byte[to - from];
        for (int i = 0; i < b.Length; i++)
        {
            b[i] = (byte)(from + i);
        }
        return Convert.ToHexStringLower(b);
    }
}
