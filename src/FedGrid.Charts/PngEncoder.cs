using System.Buffers.Binary;
using System.IO.Compression;

namespace FedGrid.Charts;

/// <summary>
/// Writes 8-bit RGB images as PNG (W3C / ISO/IEC 15948): signature, IHDR, one IDAT holding the
/// zlib stream of filtered scanlines, IEND; each chunk closed by its CRC-32.
/// </summary>
public static class PngEncoder
{
    private static readonly byte[] Signature = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A];
    private static readonly uint[] CrcTable = BuildCrcTable();

    /// <summary>Encodes <paramref name="rgb"/> (3 bytes per pixel, rows top to bottom) as a PNG file.</summary>
    /// <param name="rgb">Pixel data, exactly width * height * 3 bytes.</param>
    /// <param name="width">Image width in pixels.</param>
    /// <param name="height">Image height in pixels.</param>
    public static byte[] Encode(ReadOnlySpan<byte> rgb, int width, int height)
    {
        if (width <= 0 || height <= 0) throw new ArgumentOutOfRangeException(nameof(width), $"image size {width} x {height} must be positive");
        int stride = width * 3;
        if (rgb.Length != (long)stride * height) throw new ArgumentException($"expected {stride * height} bytes of RGB data, got {rgb.Length}", nameof(rgb));

        using var output = new MemoryStream();
        output.Write(Signature);
        Span<byte> ihdr = stackalloc byte[13];
        BinaryPrimitives.WriteInt32BigEndian(ihdr, width);
        BinaryPrimitives.WriteInt32BigEndian(ihdr[4..], height);
        ihdr[8] = 8;  // bit depth
        ihdr[9] = 2;  // colour type: truecolour
        ihdr[10] = 0; // compression: deflate
        ihdr[11] = 0; // filter method 0 (adaptive, five filter types)
        ihdr[12] = 0; // no interlace
        WriteChunk(output, "IHDR"u8, ihdr);

        using var idat = new MemoryStream();
        using (var z = new ZLibStream(idat, CompressionLevel.Optimal, leaveOpen: true))
        {
            var line = new byte[stride + 1];
            var best = new byte[stride + 1];
            for (int y = 0; y < height; y++)
            {
                var row = rgb.Slice(y * stride, stride);
                var above = y > 0 ? rgb.Slice((y - 1) * stride, stride) : default;
                long bestScore = long.MaxValue;
                for (byte filter = 0; filter <= 2; filter++) // None, Sub, Up; keep the one with the smallest sum of |residual|
                {
                    long score = Filter(filter, row, above, line);
                    if (score < bestScore) { bestScore = score; (best, line) = (line, best); }
                }
                z.Write(best);
            }
        }
        WriteChunk(output, "IDAT"u8, idat.GetBuffer().AsSpan(0, (int)idat.Length));
        WriteChunk(output, "IEND"u8, []);
        return output.ToArray();
    }

    /// <summary>CRC-32 as PNG uses it (ISO 3309 / ITU-T V.42, reflected polynomial 0xEDB88320, initial and final XOR 0xFFFFFFFF).</summary>
    /// <param name="data">Bytes to check.</param>
    public static uint Crc32(ReadOnlySpan<byte> data) => UpdateCrc(0xFFFFFFFFu, data) ^ 0xFFFFFFFFu;

    private static uint UpdateCrc(uint crc, ReadOnlySpan<byte> data)
    {
        foreach (byte b in data) crc = CrcTable[(crc ^ b) & 0xFF] ^ (crc >> 8);
        return crc;
    }

    private static uint[] BuildCrcTable()
    {
        var table = new uint[256];
        for (uint n = 0; n < 256; n++)
        {
            uint c = n;
            for (int k = 0; k < 8; k++) c = (c & 1) != 0 ? 0xEDB88320u ^ (c >> 1) : c >> 1;
            table[n] = c;
        }
        return table;
    }

    private static void WriteChunk(Stream output, ReadOnlySpan<byte> type, ReadOnlySpan<byte> data)
    {
        Span<byte> word = stackalloc byte[4];
        BinaryPrimitives.WriteInt32BigEndian(word, data.Length);
        output.Write(word);
        output.Write(type);
        output.Write(data);
        BinaryPrimitives.WriteUInt32BigEndian(word, UpdateCrc(UpdateCrc(0xFFFFFFFFu, type), data) ^ 0xFFFFFFFFu);
        output.Write(word);
    }

    private static long Filter(byte filter, ReadOnlySpan<byte> row, ReadOnlySpan<byte> above, Span<byte> line)
    {
        line[0] = filter;
        long score = 0;
        for (int i = 0; i < row.Length; i++)
        {
            int predictor = filter switch
            {
                1 => i >= 3 ? row[i - 3] : 0,
                2 => above.IsEmpty ? 0 : above[i],
                _ => 0,
            };
            byte r = (byte)(row[i] - predictor);
            line[i + 1] = r;
            score += r < 128 ? r : 256 - r;
        }
        return score;
    }
}
