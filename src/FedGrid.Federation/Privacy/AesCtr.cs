using System.Buffers.Binary;
using System.Security.Cryptography;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// AES in counter mode (NIST SP 800-38A, §6.5), built from the AES block cipher (ECB of single blocks) because .NET has
/// no CTR mode: keystream block j is AES_K(T_j) with T_{j+1} = T_j + 1 as a big-endian 128-bit integer (the standard
/// incrementing function over the whole block, SP 800-38A Appendix B.1 with m = 128). Key of 16, 24 or 32 bytes.
/// Counter blocks are encrypted in batches of <see cref="BatchBlocks"/> through one reusable transform: no allocation
/// per call.
/// </summary>
public sealed class AesCtr : IDisposable
{
    /// <summary>Counter blocks encrypted per call into the block cipher.</summary>
    public const int BatchBlocks = 64;

    private const int BlockBytes = 16;
    private readonly Aes _aes;
    private readonly ICryptoTransform _ecb;
    private readonly byte[] _counters = new byte[BatchBlocks * BlockBytes];
    private readonly byte[] _keystream = new byte[BatchBlocks * BlockBytes];

    /// <summary>Creates the keystream generator for a key.</summary>
    /// <param name="key">AES key: 16, 24 or 32 bytes.</param>
    /// <exception cref="ArgumentException">Wrong key length.</exception>
    public AesCtr(ReadOnlySpan<byte> key)
    {
        if (key.Length is not (16 or 24 or 32))
        {
            throw new ArgumentException($"AES keys are 16, 24 or 32 bytes; got {key.Length}", nameof(key));
        }
        _aes = Aes.Create();
        _aes.Key = key.ToArray();
        _aes.Mode = CipherMode.ECB;
        _aes.Padding = PaddingMode.None;
        _ecb = _aes.CreateEncryptor();
    }

    /// <summary>
    /// Writes keystream bytes AES_K(T_0) ‖ AES_K(T_0 + 1) ‖ … into <paramref name="output"/> (a partial last block is
    /// truncated, as SP 800-38A allows for the final block).
    /// </summary>
    /// <param name="initialCounter">T_0, 16 bytes.</param>
    /// <param name="output">Receives the keystream.</param>
    public void Keystream(ReadOnlySpan<byte> initialCounter, Span<byte> output) => Run(initialCounter, ReadOnlySpan<byte>.Empty, output, xor: false);

    /// <summary>Encrypts or decrypts (the same operation): output = input ⊕ keystream.</summary>
    /// <param name="initialCounter">T_0, 16 bytes.</param>
    /// <param name="input">Plaintext or ciphertext.</param>
    /// <param name="output">Receives the result (same length as the input; may be the same memory).</param>
    public void Transform(ReadOnlySpan<byte> initialCounter, ReadOnlySpan<byte> input, Span<byte> output)
    {
        if (input.Length != output.Length)
        {
            throw new ArgumentException($"CTR input of {input.Length} bytes, output of {output.Length}", nameof(output));
        }
        Run(initialCounter, input, output, xor: true);
    }

    /// <summary>Adds one to a 128-bit big-endian counter block, wrapping modulo 2^128 (SP 800-38A Appendix B.1).</summary>
    /// <param name="counter">The 16-byte block, updated in place.</param>
    public static void Increment(Span<byte> counter)
    {
        if (counter.Length != BlockBytes)
        {
            throw new ArgumentException("counter blocks are 16 bytes", nameof(counter));
        }
        ulong low = BinaryPrimitives.ReadUInt64BigEndian(counter[8..]) + 1;
        BinaryPrimitives.WriteUInt64BigEndian(counter[8..], low);
        if (low == 0)
        {
            BinaryPrimitives.WriteUInt64BigEndian(counter, BinaryPrimitives.ReadUInt64BigEndian(counter) + 1);
        }
    }

    /// <inheritdoc />
    public void Dispose()
    {
        _ecb.Dispose();
        _aes.Dispose();
    }

    private void Run(ReadOnlySpan<byte> initialCounter, ReadOnlySpan<byte> input, Span<byte> output, bool xor)
    {
        if (initialCounter.Length != BlockBytes)
        {
            throw new ArgumentException($"the initial counter block is 16 bytes; got {initialCounter.Length}", nameof(initialCounter));
        }
        Span<byte> counter = stackalloc byte[BlockBytes];
        initialCounter.CopyTo(counter);
        int done = 0;
        while (done < output.Length)
        {
            int bytes = Math.Min(output.Length - done, _counters.Length);
            int blocks = (bytes + BlockBytes - 1) / BlockBytes;
            for (int b = 0; b < blocks; b++)
            {
                counter.CopyTo(_counters.AsSpan(b * BlockBytes, BlockBytes));
                Increment(counter);
            }
            _ecb.TransformBlock(_counters, 0, blocks * BlockBytes, _keystream, 0);
            Span<byte> target = output.Slice(done, bytes);
            ReadOnlySpan<byte> stream = _keystream.AsSpan(0, bytes);
            if (xor)
            {
                ReadOnlySpan<byte> source = input.Slice(done, bytes);
                for (int i = 0; i < bytes; i++)
                {
                    target[i] = (byte)(source[i] ^ stream[i]);
                }
            }
            else
            {
                stream.CopyTo(target);
            }
            done += bytes;
        }
    }
}
