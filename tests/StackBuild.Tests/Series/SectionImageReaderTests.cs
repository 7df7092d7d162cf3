using BitMiracle.LibTiff.Classic;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using StackBuild.IO;
using Xunit;

namespace StackBuild.Tests;

public class SectionImageReaderTests
{
    // A pattern that reaches 0 and 65535 and many values between, so scaling and byte order both show.
    private static ushort Wide(int x, int y) => (x, y) == (0, 0) ? (ushort)0 : (x, y) == (1, 0) ? (ushort)65535 : (ushort)((x * 7919 + y * 104729 + 258) % 65536);

    private static void AssertExact16(GrayImage image, Func<int, int, ushort> value)
    {
        for (int y = 0; y < image.Height; y++)
            for (int x = 0; x < image.Width; x++)
                Assert.Equal((float)(value(x, y) / 65535.0), image[x, y]);
    }

    [Fact]
    public void Gray16PngReadsEverySampleExactly()
    {
        using var dir = new SectionImageTempFolder();
        var path = dir.File("s1.png");
        SectionImageTestFiles.Gray16Png(path, 37, 23, Wide);
        Assert.Equal(new ImageFacts(37, 23, 16, 1, "PNG"), SectionImageReader.Identify(path));
        var loaded = SectionImageReader.ReadSection(path);
        Assert.Equal(1, loaded.Downsample);
        Assert.Equal((37, 23), (loaded.Image.Width, loaded.Image.Height));
        AssertExact16(loaded.Image, Wide);
        Assert.Equal(0f, loaded.Image[0, 0]);
        Assert.Equal(1f, loaded.Image[1, 0]);
    }

    [Fact]
    public void Gray8PngAndTiffReadAsValueOver255()
    {
        using var dir = new SectionImageTempFolder();
        static byte V(int x, int y) => (byte)((x * 31 + y * 17) % 256);
        SectionImageTestFiles.Gray8Png(dir.File("a.png"), 20, 9, V);
        SectionImageTestFiles.Gray8Tiff(dir.File("a.tif"), 20, 9, V);
        Assert.Equal(new ImageFacts(20, 9, 8, 1, "PNG"), SectionImageReader.Identify(dir.File("a.png")));
        Assert.Equal(new ImageFacts(20, 9, 8, 1, "TIFF", LosslessStrips: true), SectionImageReader.Identify(dir.File("a.tif")));
        foreach (var name in new[] { "a.png", "a.tif" })
        {
            var image = SectionImageReader.ReadGray(dir.File(name));
            for (int y = 0; y < 9; y++)
                for (int x = 0; x < 20; x++)
                    Assert.Equal((float)(V(x, y) / 255.0), image[x, y]);
        }
    }

    [Fact]
    public void RgbChannelsAreChosenAndLuminanceMatchesImageSharpsGray()
    {
        using var dir = new SectionImageTempFolder();
        var path = dir.File("rgb.png");
        static Rgb24 V(int x, int y) => new((byte)(x * 20), (byte)(y * 25), (byte)(255 - x * 10));
        SectionImageTestFiles.Rgb8Png(path, 12, 10, V);
        Assert.Equal(new ImageFacts(12, 10, 8, 3, "PNG"), SectionImageReader.Identify(path));
        var red = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = GrayChannel.Red });
        var green = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = GrayChannel.Green });
        var blue = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = GrayChannel.Blue });
        var luminance = SectionImageReader.ReadGray(path);
        // Outside reference: ImageSharp's own conversion to L8 (BT.709 luma, rounded to 8 bits).
        using var reference = Image.Load<L8>(path);
        for (int y = 0; y < 10; y++)
            for (int x = 0; x < 12; x++)
            {
                var p = V(x, y);
                Assert.Equal((float)(p.R / 255.0), red[x, y]);
                Assert.Equal((float)(p.G / 255.0), green[x, y]);
                Assert.Equal((float)(p.B / 255.0), blue[x, y]);
                Assert.Equal(reference[x, y].PackedValue / 255.0, luminance[x, y], 1.0 / 255);
                Assert.Equal((0.2126 * p.R + 0.7152 * p.G + 0.0722 * p.B) / 255, luminance[x, y], 1e-6);
            }
    }

    [Fact]
    public void Rgb16PngKeepsSixteenBitsAndAlphaIsIgnored()
    {
        using var dir = new SectionImageTempFolder();
        SectionImageTestFiles.Rgb16Png(dir.File("rgb16.png"), 9, 7, (x, y) => new Rgb48(Wide(x, y), (ushort)(x * 1000), 65535));
        Assert.Equal(new ImageFacts(9, 7, 16, 3, "PNG"), SectionImageReader.Identify(dir.File("rgb16.png")));
        AssertExact16(SectionImageReader.ReadGray(dir.File("rgb16.png"), new ImageReadOptions { Channel = GrayChannel.Red }), Wide);

        SectionImageTestFiles.Rgba8Png(dir.File("rgba.png"), 4, 4, (x, y) => new Rgba32(200, 100, 50, (byte)(x * 60)));
        Assert.Equal(new ImageFacts(4, 4, 8, 3, "PNG"), SectionImageReader.Identify(dir.File("rgba.png")));
        var image = SectionImageReader.ReadGray(dir.File("rgba.png"), new ImageReadOptions { Channel = GrayChannel.Red });
        Assert.All(image.Pixels, v => Assert.Equal((float)(200 / 255.0), v)); // fully transparent pixels too
    }

    [Fact]
    public void JpegGrayAndColourAreIdentifiedAndRead()
    {
        using var dir = new SectionImageTempFolder();
        SectionImageTestFiles.GrayJpeg(dir.File("g.jpg"), 16, 16, (x, y) => 128);
        SectionImageTestFiles.RgbJpeg(dir.File("c.JPEG"), 16, 16, (x, y) => new Rgb24(200, 100, 50));
        Assert.Equal(new ImageFacts(16, 16, 8, 1, "JPEG"), SectionImageReader.Identify(dir.File("g.jpg")));
        Assert.Equal(new ImageFacts(16, 16, 8, 3, "JPEG"), SectionImageReader.Identify(dir.File("c.JPEG")));
        // JPEG is lossy; a flat image comes back within a couple of levels.
        Assert.All(SectionImageReader.ReadGray(dir.File("g.jpg")).Pixels, v => Assert.Equal(128 / 255.0, v, 2.5 / 255));
        Assert.All(SectionImageReader.ReadGray(dir.File("c.JPEG"), new ImageReadOptions { Channel = GrayChannel.Red }).Pixels,
            v => Assert.Equal(200 / 255.0, v, 3.5 / 255));
    }

    [Theory]
    [InlineData(false, false)]
    [InlineData(true, false)]
    [InlineData(false, true)]
    public void TiledGray16TiffReadsExactly(bool bigEndian, bool striped)
    {
        using var dir = new SectionImageTempFolder();
        var path = dir.File("tiled.tif");
        // 45 × 33 with 16 × 16 tiles: the right and bottom tiles are cut short.
        SectionImageTestFiles.LibTiff(path, 45, 33, 16, 1, (x, y, s) => Wide(x, y), tile: striped ? null : 16, bigEndian: bigEndian);
        Assert.Equal(new ImageFacts(45, 33, 16, 1, striped ? "TIFF" : "TIFF (tiled)", LosslessStrips: striped), SectionImageReader.Identify(path));
        AssertExact16(SectionImageReader.ReadGray(path), Wide);
    }

    [Theory]
    [InlineData(8, false)]
    [InlineData(8, true)]
    [InlineData(16, false)]
    [InlineData(16, true)]
    public void TiledRgbTiffGivesEachChannel(int bits, bool planar)
    {
        using var dir = new SectionImageTempFolder();
        var path = dir.File("rgb.tiff");
        int max = (1 << bits) - 1;
        int V(int x, int y, int s) => (x * 37 + y * 11 + s * 101) % (max + 1);
        SectionImageTestFiles.LibTiff(path, 21, 18, bits, 3, V, planar: planar);
        Assert.Equal(new ImageFacts(21, 18, bits, 3, "TIFF (tiled)"), SectionImageReader.Identify(path));
        var channels = new[] { GrayChannel.Red, GrayChannel.Green, GrayChannel.Blue };
        for (int s = 0; s < 3; s++)
        {
            var image = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = channels[s] });
            for (int y = 0; y < 18; y++)
                for (int x = 0; x < 21; x++)
                    Assert.Equal((float)((double)V(x, y, s) / max), image[x, y]);
        }
        var luminance = SectionImageReader.ReadGray(path);
        Assert.Equal((0.2126 * V(5, 7, 0) + 0.7152 * V(5, 7, 1) + 0.0722 * V(5, 7, 2)) / max, luminance[5, 7], 1e-6);
    }

    [Fact]
    public void StripedTiffThroughLibTiffMatchesImageSharp()
    {
        // The LibTiff path also serves striped TIFF that ImageSharp refuses; both paths must agree sample for sample.
        using var dir = new SectionImageTempFolder();
        var path = dir.File("striped.tif");
        int V(int x, int y, int s) => Wide(x, y) ^ (s * 4099);
        SectionImageTestFiles.LibTiff(path, 23, 17, 16, 3, V, tile: null, planar: true);
        foreach (var channel in Enum.GetValues<GrayChannel>())
        {
            var sink = new BoxDownsampler(23, 17, 1);
            TiffSectionFile.Read(path, channel, sink);
            var viaLibTiff = sink.Finish();
            var viaReader = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = channel });
            Assert.Equal(viaReader.Pixels, viaLibTiff.Pixels, (a, b) => Math.Abs(a - b) <= 1e-6f);
        }
        var green = new BoxDownsampler(23, 17, 1);
        TiffSectionFile.Read(path, GrayChannel.Green, green);
        AssertExact16(green.Finish(), (x, y) => (ushort)V(x, y, 1));
    }

    [Fact]
    public void TiledJpegTiffAndMinIsWhiteTiffAreRead()
    {
        using var dir = new SectionImageTempFolder();
        SectionImageTestFiles.LibTiff(dir.File("jpeg.tif"), 40, 30, 8, 3, (x, y, s) => s switch { 0 => 200, 1 => 100, _ => 50 },
            photometric: Photometric.YCBCR, compression: Compression.JPEG);
        Assert.Equal(new ImageFacts(40, 30, 8, 3, "TIFF (tiled)"), SectionImageReader.Identify(dir.File("jpeg.tif")));
        Assert.All(SectionImageReader.ReadGray(dir.File("jpeg.tif"), new ImageReadOptions { Channel = GrayChannel.Red }).Pixels,
            v => Assert.Equal(200 / 255.0, v, 4.0 / 255));

        foreach (int? tile in new int?[] { 16, null })
        {
            SectionImageTestFiles.LibTiff(dir.File("white.tif"), 20, 20, 8, 1, (x, y, s) => x * 10, tile: tile, photometric: Photometric.MINISWHITE);
            var inverted = SectionImageReader.ReadGray(dir.File("white.tif"));
            Assert.Equal((float)(1 - 70 / 255.0), inverted[7, 3], 6);
        }
    }

    [Fact]
    public void PaletteTiffLooksUpItsColourMap()
    {
        using var dir = new SectionImageTempFolder();
        ushort[] red = new ushort[256], green = new ushort[256], blue = new ushort[256];
        for (int i = 0; i < 256; i++) (red[i], green[i], blue[i]) = ((ushort)(i * 257), (ushort)(65535 - i * 257), 1000);
        foreach (int? tile in new int?[] { 16, null })
        {
            var path = dir.File($"palette{tile}.tif");
            SectionImageTestFiles.LibTiff(path, 20, 18, 8, 1, (x, y, s) => x * 12, tile: tile, photometric: Photometric.PALETTE,
                colourMap: (red, green, blue));
            Assert.Equal(3, SectionImageReader.Identify(path).Channels);
            var image = SectionImageReader.ReadGray(path, new ImageReadOptions { Channel = GrayChannel.Green });
            // ImageSharp keeps 8 bits of the 16-bit map on the striped path; LibTiff keeps all 16.
            Assert.Equal(1 - 60 / 255.0, image[5, 9], 1.0 / 255);
        }
    }

    [Fact]
    public void DownsamplingAveragesBlocksAndKeepsTheMean()
    {
        using var dir = new SectionImageTempFolder();
        // Ramp v = x + 100·y: the mean of a whole f × f block is the value at its centre (analytic).
        static ushort Ramp(int x, int y) => (ushort)(x + 100 * y);
        SectionImageTestFiles.Gray16Png(dir.File("ramp.png"), 96, 64, Ramp);
        SectionImageTestFiles.LibTiff(dir.File("ramp.tif"), 96, 64, 16, 1, (x, y, s) => Ramp(x, y));
        foreach (var name in new[] { "ramp.png", "ramp.tif" })
        {
            var full = SectionImageReader.ReadGray(dir.File(name));
            var loaded = SectionImageReader.ReadSection(dir.File(name), new ImageReadOptions { MaxLongSide = 24 });
            Assert.Equal(4, loaded.Downsample);
            Assert.Equal((24, 16), (loaded.Image.Width, loaded.Image.Height));
            Assert.Equal(full.Pixels.Average(v => (double)v), loaded.Image.Pixels.Average(v => (double)v), 1e-6);
            for (int by = 0; by < 16; by++)
                for (int bx = 0; bx < 24; bx++)
                    Assert.Equal((4 * bx + 1.5 + 100 * (4 * by + 1.5)) / 65535, loaded.Image[bx, by], 1e-6);
        }
    }

    [Fact]
    public void DownsamplingEdgeBlocksAverageThePixelsThatExist()
    {
        using var dir = new SectionImageTempFolder();
        static ushort Ramp(int x, int y) => (ushort)(x + 100 * y);
        SectionImageTestFiles.Gray16Png(dir.File("odd.png"), 10, 7, Ramp);
        var loaded = SectionImageReader.ReadSection(dir.File("odd.png"), new ImageReadOptions { MaxLongSide = 4 });
        Assert.Equal(3, loaded.Downsample); // ceil(10 / 4)
        Assert.Equal((4, 3), (loaded.Image.Width, loaded.Image.Height));
        // Last column holds x = 9 only, last row y = 6 only.
        Assert.Equal((9 + 100 * 6) / 65535.0, loaded.Image[3, 2], 1e-7);
        Assert.Equal((4 + 100 * 6) / 65535.0, loaded.Image[1, 2], 1e-7);
        Assert.Equal((9 + 100 * 4) / 65535.0, loaded.Image[3, 1], 1e-7);
        Assert.True(loaded.Image.Width <= 4 && loaded.Image.Height <= 4);
    }

    [Fact]
    public void ProblemsAreOneLineNamingTheFileAndWhatToDo()
    {
        using var dir = new SectionImageTempFolder();
        var junk = dir.File("junk.png");
        File.WriteAllBytes(junk, [1, 2, 3, 4, 5, 6, 7, 8, 9, 10]);
        AssertProblem($"{junk}: is not a readable PNG, TIFF or JPEG image (its header is not recognised) — replace it with a readable image or move it out of the series folder",
            () => SectionImageReader.Identify(junk));

        var gif = dir.File("really-a-gif.png");
        using (var image = new Image<L8>(4, 4)) image.SaveAsGif(gif);
        AssertProblem($"{gif}: is a GIF image, which is not read as a section image — convert it to PNG or TIFF", () => SectionImageReader.Identify(gif));

        var cmyk = dir.File("cmyk.tif");
        SectionImageTestFiles.LibTiff(cmyk, 8, 8, 8, 4, (x, y, s) => 10, photometric: Photometric.SEPARATED);
        AssertProblem($"{cmyk}: is a CMYK TIFF (print colours), which is not read — convert it to RGB or gray", () => SectionImageReader.Identify(cmyk));

        var floats = dir.File("float.tif");
        SectionImageTestFiles.LibTiff(floats, 8, 8, 32, 1, (x, y, s) => x, format: SampleFormat.IEEEFP);
        AssertProblem($"{floats}: is a TIFF with floating-point samples, which is not read — convert it to 8- or 16-bit gray or RGB (PNG or TIFF)",
            () => SectionImageReader.Identify(floats));

        // A tiled TIFF whose compression neither ImageSharp nor LibTiff decodes (33003: JPEG 2000 as some slide scanners write it).
        var jp2k = dir.File("jp2k.tif");
        SectionImageTestFiles.LibTiff(jp2k, 32, 32, 8, 1, (x, y, s) => x, compression: Compression.NONE);
        SectionImageTestFiles.PatchTiffCompression(jp2k, 33003);
        AssertProblem($"{jp2k}: is a TIFF compressed with scheme 33003, which cannot be decoded here — save it again uncompressed or with LZW, Deflate or JPEG compression",
            () => SectionImageReader.Identify(jp2k));

        var missing = dir.File("missing.png");
        AssertProblem($"{missing}: the file does not exist — check the file name and folder", () => SectionImageReader.Identify(missing));
    }

    [Fact]
    public void OversizedImagesAreRefusedFromTheirHeader()
    {
        using var dir = new SectionImageTempFolder();
        var small = dir.File("small.png");
        SectionImageTestFiles.Gray8Png(small, 20, 10, (x, y) => 1);
        AssertProblem($"{small}: declares 20 × 10 pixels (200), more than the limit of 199 — check that the file is not damaged; if the size is right, export the section smaller",
            () => SectionImageReader.ReadGray(small, new ImageReadOptions { MaxPixels = 199 }));

        // The header claims 100000 × 100000; reading must stop at the header (10^10 pixels would not fit in memory).
        var absurd = dir.File("absurd.png");
        SectionImageTestFiles.Gray8Png(absurd, 20, 10, (x, y) => 1);
        SectionImageTestFiles.PatchPngSize(absurd, 100_000, 100_000);
        Assert.Equal(new ImageFacts(100_000, 100_000, 8, 1, "PNG"), SectionImageReader.Identify(absurd));
        AssertProblem($"{absurd}: declares 100000 × 100000 pixels (10,000,000,000), more than the limit of 2,000,000,000 — check that the file is not damaged; if the size is right, export the section smaller",
            () => SectionImageReader.ReadGray(absurd));
    }

    [Fact]
    public void TruncatedImageIsAProblemWhenRead()
    {
        using var dir = new SectionImageTempFolder();
        var path = dir.File("cut.png");
        SectionImageTestFiles.Gray16Png(path, 64, 64, Wide);
        var bytes = File.ReadAllBytes(path);
        File.WriteAllBytes(path, bytes[..(bytes.Length / 2)]);
        Assert.Equal(new ImageFacts(64, 64, 16, 1, "PNG"), SectionImageReader.Identify(path));
        var e = Assert.ThrowsAny<InputProblemException>(() => SectionImageReader.ReadGray(path));
        Assert.Equal(path, e.File);
        Assert.StartsWith($"{path}: cannot be decoded (", e.Message);
        Assert.EndsWith(") — check that the file is complete (copy it again) or export it again", e.Message);
        Assert.DoesNotContain('\n', e.Message);
    }

    [Fact]
    public void AnImageDeclaringMorePixelsThanItsBytesCanHoldIsRefusedBeforeDecoding()
    {
        using var dir = new SectionImageTempFolder();
        // Within the 2·10⁹-pixel limit, but 1.35·10⁹ bytes of deflated rows cannot come from a file of a few dozen bytes.
        var bomb = dir.File("bomb.png");
        SectionImageTestFiles.Gray8Png(bomb, 20, 10, (x, y) => 1);
        SectionImageTestFiles.PatchPngSize(bomb, 30_000, 45_000);
        long before = GC.GetAllocatedBytesForCurrentThread();
        var e = Assert.Throws<InputProblemException>(() => SectionImageReader.ReadGray(bomb));
        Assert.True(GC.GetAllocatedBytesForCurrentThread() - before < 16 << 20);
        Assert.Equal($"{bomb}: declares 30000 × 45000 pixels, which a file of {new FileInfo(bomb).Length:N0} bytes cannot hold even at the greatest deflate " +
            "compression (1,032:1) — its header is damaged or the file was cut short; copy the file again from its source or export it again", e.Message);

        // The same image at its true size is read.
        var honest = dir.File("honest.png");
        SectionImageTestFiles.Gray8Png(honest, 20, 10, (x, y) => 1);
        Assert.Equal(20, SectionImageReader.ReadGray(honest).Width);
    }

    [Fact]
    public void DamagedTiledTiffIsAProblem()
    {
        using var dir = new SectionImageTempFolder();
        var cut = dir.File("cut.tif");
        SectionImageTestFiles.LibTiff(cut, 64, 64, 16, 1, (x, y, s) => Wide(x, y));
        var bytes = File.ReadAllBytes(cut);
        File.WriteAllBytes(cut, bytes[..(bytes.Length * 2 / 3)]); // LibTiff writes the directory last: it is gone
        var e = Assert.ThrowsAny<InputProblemException>(() => SectionImageReader.Identify(cut));
        Assert.StartsWith($"{cut}: the TIFF structure cannot be read (", e.Message);
        Assert.EndsWith(") — check that the file is complete (copy it again) or export it again", e.Message);

        var garbled = dir.File("garbled.tif");
        SectionImageTestFiles.LibTiff(garbled, 64, 64, 16, 1, (x, y, s) => Wide(x, y));
        bytes = File.ReadAllBytes(garbled);
        bytes.AsSpan(8, 40).Fill(0xA5); // the first tile's compressed data
        File.WriteAllBytes(garbled, bytes);
        Assert.Equal(new ImageFacts(64, 64, 16, 1, "TIFF (tiled)"), SectionImageReader.Identify(garbled));
        e = Assert.ThrowsAny<InputProblemException>(() => SectionImageReader.ReadGray(garbled));
        Assert.StartsWith($"{garbled}: a tile or strip cannot be decoded", e.Message);
        Assert.EndsWith(" — check that the file is complete (copy it again) or export it again", e.Message);
    }

    internal static void AssertProblem(string expected, Action action)
    {
        var e = Assert.ThrowsAny<InputProblemException>(action);
        Assert.Equal(expected, e.Message);
        Assert.DoesNotContain('\n', e.Message);
    }
}
