using System.Buffers.Binary;
using System.IO.Compression;

namespace FedGrid.Charts.Tests;

/// <summary>
/// A test-side PNG reader written from the PNG specification (W3C / ISO/IEC 15948), independent
/// of the encoder: its own bitwise CRC-32, all five filter types, strict chunk checks.
/// </summary>
internal static class PngReader
{
    public sealed record Image(int Width, int Height, byte[] Rgb, IReadOnlyList<string> ChunkTypes)
    {
        public (byte R, byte G, byte B) At(int x, int y) { int o = (y * Width + x) * 3; return (Rgb[o], Rgb[o + 1], Rgb[o + 2]); }
    }

    /// <summary>Bitwise CRC-32 (ISO 3309, reflected polynomial 0xEDB88320), no table.</summary>
    public static uint Crc32(ReadOnlySpan<byte> data)
    {
        uint crc = 0xFFFFFFFF;
        foreach (byte b in data)
        {
            crc ^= b;
            for (int k = 0; k < 8; k++) crc = (crc >> 1) ^ (0xEDB88320u & (uint)-(int)(crc & 1));
        }
        return ~crc;
    }

    public static Image Read(byte[] png)
    {
        byte[] signature = [0x89, (byte)'P', (byte)'N', (byte)'G', 0x0D, 0x0A, 0x1A, 0x0A];
        Assert.Equal(signature, png[..8]);
        var types = new List<string>();
        using var idat = new MemoryStream();
        int width = 0, height = 0, pos = 8;
        while (pos < png.Length)
        {
            int length = BinaryPrimitives.ReadInt32BigEndian(png.AsSpan(pos));
            var typeAndData = png.AsSpan(pos + 4, 4 + length);
            string type = System.Text.Encoding.ASCII.GetString(typeAndData[..4]);
            uint crc = BinaryPrimitives.ReadUInt32BigEndian(png.AsSpan(pos + 8 + length));
            Assert.True(crc == Crc32(typeAndData), $"CRC of chunk {type}");
            types.Add(type);
            var data = typeAndData[4..];
            if (type == "IHDR")
            {
                Assert.Equal(13, length);
                width = BinaryPrimitives.ReadInt32BigEndian(data);
                height = BinaryPrimitives.ReadInt32BigEndian(data[4..]);
                Assert.Equal(new byte[] { 8, 2, 0, 0, 0 }, data[8..13].ToArray()); // 8-bit truecolour, deflate, filter 0, no interlace
            }
            else if (type == "IDAT") idat.Write(data);
            pos += 12 + length;
            if (type == "IEND") break;
        }
        Assert.Equal(pos, png.Length); // nothing after IEND
        Assert.Equal("IHDR", types[0]);
        Assert.Equal("IEND", types[^1]);

        idat.Position = 0;
        using var z = new ZLibStream(idat, CompressionMode.Decompress);
        using var raw = new MemoryStream();
        z.CopyTo(raw);
        var bytes = raw.ToArray();
        int stride = width * 3;
        Assert.Equal(height * (stride + 1), bytes.Length);
        var rgb = new byte[height * stride];
        for (int y = 0; y < height; y++)
        {
            byte filter = bytes[y * (stride + 1)];
            Assert.InRange(filter, (byte)0, (byte)4);
            for (int i = 0; i < stride; i++)
            {
                int a = i >= 3 ? rgb[y * stride + i - 3] : 0;
                int b = y > 0 ? rgb[(y - 1) * stride + i] : 0;
                int c = i >= 3 && y > 0 ? rgb[(y - 1) * stride + i - 3] : 0;
                int p = a + b - c, pa = Math.Abs(p - a), pb = Math.Abs(p - b), pc = Math.Abs(p - c);
                int pred = filter switch
                {
                    0 => 0, 1 => a, 2 => b, 3 => (a + b) / 2,
                    _ => pa <= pb && pa <= pc ? a : pb <= pc ? b : c,
                };
                rgb[y * stride + i] = (byte)(bytes[y * (stride + 1) + 1 + i] + pred);
            }
        }
        return new Image(width, height, rgb, types);
    }
}
