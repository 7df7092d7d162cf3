using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// Large TIFFs of lossless strips are read strip by strip through LibTiff (<see cref="SectionImageReader.StripReadBytes"/>);
/// every gray value must be the one ImageSharp gives for a PNG of the same pixels (PNG: ISO/IEC 15948, decoded whole).
/// </summary>
public sealed class StripReadTests
{
    [Theory]
    [InlineData(16, 1, "None")]     // 3000 × 3000 × 2 bytes = 18 MB: over the threshold
    [InlineData(16, 1, "Deflate")]
    [InlineData(8, 3, "Lzw")]       // 2500 × 2500 × 3 bytes = 18.75 MB
    public void StripsGiveTheSameGrayAsTheWholeImage(int bits, int samples, string compression)
    {
        using var folder = new SectionImageTempFolder();
        int side = bits == 16 ? 3000 : 2500;
        var tiff = Path.Combine(folder.Path, "large.tif");
        var png = Path.Combine(folder.Path, "large.png");
        int Value(int x, int y, int s) => (int)((uint)(x * 2654435761u ^ (uint)(y * 40503) ^ (uint)(s * 97)) % (bits == 16 ? 65536u : 256u));
        SectionImageTestFiles.LibTiff(tiff, side, side, bits, samples, Value, tile: null,
            compression: Enum.Parse<BitMiracle.LibTiff.Classic.Compression>(compression, ignoreCase: true));
        if (samples == 1) SectionImageTestFiles.Gray16Png(png, side, side, (x, y) => (ushort)Value(x, y, 0));
        else SectionImageTestFiles.Rgb8Png(png, side, side, (x, y) => new Rgb24((byte)Value(x, y, 0), (byte)Value(x, y, 1), (byte)Value(x, y, 2)));

        var facts = SectionImageReader.Identify(tiff);
        Assert.True(facts.LosslessStrips, "read strip by strip");
        Assert.True(facts.PixelCount * facts.Channels * facts.BitsPerChannel / 8 >= SectionImageReader.StripReadBytes);
        foreach (var channel in samples == 1 ? [GrayChannel.Luminance] : Enum.GetValues<GrayChannel>())
        {
            var options = new ImageReadOptions { Channel = channel };
            Assert.Equal(SectionImageReader.ReadGray(png, options).Pixels, SectionImageReader.ReadGray(tiff, options).Pixels);
        }
    }
}
