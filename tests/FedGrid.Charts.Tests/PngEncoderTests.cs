using System.Text;

namespace FedGrid.Charts.Tests;

public sealed class PngEncoderTests
{
    [Fact]
    public void Crc32_MatchesCatalogueCheckValue()
    {
        // CRC RevEng catalogue, CRC-32/ISO-HDLC (the CRC of PNG and zlib): check("123456789") = 0xCBF43926.
        Assert.Equal(0xCBF43926u, PngEncoder.Crc32("123456789"u8));
        Assert.Equal(0xCBF43926u, PngReader.Crc32("123456789"u8));
        Assert.Equal(0u, PngEncoder.Crc32([])); // empty input: init XOR final (catalogue definition)
    }

    [Fact]
    public void Crc32_AgreesWithBitwiseReferenceOnChunkTypes()
    {
        // PNG spec, section 5.5: CRC over chunk type and data; "IEND" with no data is always AE 42 60 82.
        Assert.Equal(0xAE426082u, PngEncoder.Crc32("IEND"u8));
        var data = Encoding.ASCII.GetBytes("IDAT some bytes that are not special at all 0123456789");
        Assert.Equal(PngReader.Crc32(data), PngEncoder.Crc32(data));
    }

    [Fact]
    public void Encode_RoundTripsArbitraryPixels()
    {
        // Noisy rows, smooth rows and a repeated row exercise all the filters the encoder picks from.
        const int w = 37, h = 23;
        var rgb = new byte[w * h * 3];
        var rng = new Random(7);
        for (int y = 0; y < h; y++)
            for (int i = 0; i < w * 3; i++)
                rgb[y * w * 3 + i] = y % 3 == 0 ? (byte)rng.Next(256) : y % 3 == 1 ? (byte)(i * 5 + y) : rgb[(y - 1) * w * 3 + i];
        var png = PngEncoder.Encode(rgb, w, h);
        var image = PngReader.Read(png);
        Assert.Equal((w, h), (image.Width, image.Height));
        Assert.Equal(rgb, image.Rgb);
        Assert.Equal(["IHDR", "IDAT", "IEND"], image.ChunkTypes);
    }

    [Fact]
    public void Encode_RejectsWrongBufferSize()
    {
        Assert.Throws<ArgumentException>(() => PngEncoder.Encode(new byte[10], 2, 2));
        Assert.Throws<ArgumentOutOfRangeException>(() => PngEncoder.Encode([], 0, 1));
    }
}
