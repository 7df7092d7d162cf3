using System.Security.Cryptography;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Series;
using Xunit;

namespace StackBuild.Tests;

public class SeriesReaderTests
{
    internal const string NamingRemedy =
        "rename the files so that the last digits in each name are its section number (for example brain_s012.png), or list the files in a manifest.csv with a section column";

    internal static readonly SeriesOptions Known = new() { PixelSizeUm = 2.0, SpacingUm = 50 };

    internal static void Gray8(string path, byte value = 100) => SectionImageTestFiles.Gray8Png(path, 8, 6, (x, y) => value);

    internal static void AssertProblems(Action action, params string[] expected)
    {
        var e = Assert.Throws<InputProblemsException>(action);
        Assert.Equal(expected, e.Problems.Select(p => p.Message).ToArray());
        Assert.All(e.Problems, p => Assert.DoesNotContain('\n', p.Message));
        Assert.Equal(string.Join(Environment.NewLine, expected), e.Message);
    }

    [Theory]
    [InlineData("brainA_s012.png", 12)]
    [InlineData("brainA_s012_x40.png", 40)] // the rule is the last run of digits; a manifest is the way out
    [InlineData("0007.tif", 7)]
    [InlineData("12_stained.jpeg", 12)]
    [InlineData("slide 3 section 15 .png", 15)]
    public void SectionNumberIsTheLastRunOfDigits(string name, int number) =>
        Assert.Equal(number, SeriesReader.SectionNumberFromFileName(name));

    [Theory]
    [InlineData("overview.png")]
    [InlineData("s99999999999.png")]
    public void NamesWithoutAUsableNumberGiveNone(string name) => Assert.Null(SeriesReader.SectionNumberFromFileName(name));

    [Fact]
    public void FolderIsOrderedByNumberWithExplicitGaps()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s10.png"));
        Gray8(dir.File("s2.PNG"));
        SectionImageTestFiles.Gray8Tiff(dir.File("s3.tif"), 8, 6, (x, y) => 5);
        SectionImageTestFiles.GrayJpeg(dir.File("s5.jpg"), 8, 6, (x, y) => 5);
        File.WriteAllBytes(dir.File(".s7.png"), [1, 2, 3]); // hidden: ignored although unreadable
        File.WriteAllText(dir.File("notes 8.txt"), "not an image");
        Directory.CreateDirectory(dir.File("sub"));
        Gray8(dir.File("sub/s9.png")); // subfolders are not searched

        var series = SeriesReader.Open(dir.Path, Known);

        Assert.Equal(Enumerable.Range(2, 9), series.Sections.Select(s => s.Number));
        Assert.Equal([2, 3, 5, 10], series.Present.Select(s => s.Number));
        Assert.All(series.Sections.Where(s => s.Number is 4 or 6 or 7 or 8 or 9), s =>
        {
            Assert.Equal(SectionStatus.Gap, s.Status);
            Assert.Null(s.FilePath);
            Assert.Null(s.Image);
        });
        Assert.Equal(series.Sections.Select(s => (s.Number - 2) * 50.0), series.Sections.Select(s => s.PositionUm));
        Assert.Equal(dir.File("s2.PNG"), series.Sections[0].FilePath);
        Assert.Equal(new ImageFacts(8, 6, 8, 1, "TIFF", LosslessStrips: true), series.Sections[1].Image);
        Assert.Equal(new ImageFacts(8, 6, 8, 1, "JPEG"), series.Sections[3].Image);
        Assert.All(series.Sections, s => Assert.Equal(2.0, s.PixelSizeUm));
        Assert.All(series.Present, s => Assert.Null(s.MountedMirrored));
        Assert.Equal((50.0, 2.0), (series.SpacingUm, series.PixelSizeUm));
        Assert.Null(series.ManifestPath);
        Assert.Equal(dir.Path, series.Folder);
        Assert.Empty(series.Warnings);
    }

    [Fact]
    public void DuplicateNumbersNameBothFiles()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("brainA_s012_x40.png"));
        Gray8(dir.File("brainA_s013_x40.png"));
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.File("brainA_s012_x40.png")}: has section number 40, as {dir.File("brainA_s013_x40.png")} has too — {NamingRemedy}");
    }

    [Fact]
    public void UnreadableImageIsReported()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        File.WriteAllText(dir.File("s2.png"), "this is text, not a picture");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.File("s2.png")}: is not a readable PNG, TIFF or JPEG image (its header is not recognised) — replace it with a readable image or move it out of the series folder");
    }

    [Fact]
    public void MixedBitDepthsNameTheDepthsAndFiles()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        SectionImageTestFiles.Gray16Png(dir.File("s2.png"), 8, 6, (x, y) => 1000);
        SectionImageTestFiles.LibTiff(dir.File("s3.tif"), 8, 6, 16, 1, (x, y, s) => 1000);
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.Path}: the sections mix bit depths: 8-bit (s1.png) and 16-bit (s2.png, s3.tif) — convert all section images to one bit depth (for example all 16-bit) and run again");
    }

    [Fact]
    public void FileWithoutNumberIsReported()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        Gray8(dir.File("overview.png"));
        AssertProblems(() => SeriesReader.Open(dir.Path, Known), $"{dir.File("overview.png")}: has no section number in its name — {NamingRemedy}");
    }

    [Fact]
    public void EmptyFolderAndMissingInputAreReported()
    {
        using var dir = new SectionImageTempFolder();
        File.WriteAllText(dir.File("readme.txt"), "no images here");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.Path}: no section images (.png, .tif, .tiff, .jpg, .jpeg) found — put the section images in this folder (subfolders are not searched), or give the folder that holds them");
        var missing = dir.File("nowhere");
        AssertProblems(() => SeriesReader.Open(missing, Known),
            $"{missing}: does not exist — give the folder that holds the section images, or its manifest.csv");
    }

    [Fact]
    public void AbsurdDeclaredSizeIsRefusedFromTheHeader()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        Gray8(dir.File("s2.png"));
        SectionImageTestFiles.PatchPngSize(dir.File("s2.png"), 3_000_000, 3_000_000);
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.File("s2.png")}: declares 3000000 × 3000000 pixels (9,000,000,000,000), more than the limit of 2,000,000,000 — check that the file is not damaged; if the size is right, export the section smaller");
    }

    [Fact]
    public void UnknownPixelSizeAndSpacingSayHowToGiveThem()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        Gray8(dir.File("s2.png"));
        AssertProblems(() => SeriesReader.Open(dir.Path, new SeriesOptions()),
            $"{dir.Path}: the section spacing is unknown — give it with --spacing (micrometres between consecutive section numbers, for example --spacing 50) or a line '#! spacing_um = 50' in manifest.csv",
            $"{dir.Path}: the pixel size is unknown — give it with --pixel-size (micrometres per image pixel, for example --pixel-size 4.0) or a line '#! pixel_size_um = 4.0' in manifest.csv");
        AssertProblems(() => SeriesReader.Open(dir.Path, new SeriesOptions { PixelSizeUm = -1, SpacingUm = 50 }),
            "--pixel-size must be a positive number (micrometres per image pixel), not -1 — give for example --pixel-size 4.0");
    }

    [Fact]
    public void SectionNumbersFarApartAreANamingProblem()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        Gray8(dir.File("scan_20231115.png"));
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.Path}: section numbers run from 1 ({dir.File("s1.png")}) to 20231115 ({dir.File("scan_20231115.png")}), which would leave 20,231,113 gaps — {NamingRemedy}");
    }

    [Fact]
    public void AllProblemsAreCollectedInOnePass()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("a1.png"));
        Gray8(dir.File("b1.png"));
        File.WriteAllBytes(dir.File("c2.tif"), [0x49, 0x49, 42, 0, 1, 2]);
        Gray8(dir.File("overview.jpg"));
        var e = Assert.Throws<InputProblemsException>(() => SeriesReader.Open(dir.Path, new SeriesOptions { SpacingUm = 10 }));
        var files = e.Problems.Select(p => p.File).ToList();
        Assert.Equal([dir.File("overview.jpg"), dir.File("a1.png"), dir.File("c2.tif"), dir.Path], files);
        Assert.Contains("pixel size is unknown", e.Problems[^1].Problem);
    }

    [Fact]
    public void SeriesWithTiledTiffLoadsEverySection()
    {
        using var dir = new SectionImageTempFolder();
        SectionImageTestFiles.Gray16Png(dir.File("sec_01.png"), 40, 30, (x, y) => (ushort)(x * 1000));
        SectionImageTestFiles.LibTiff(dir.File("sec_02.tif"), 40, 30, 16, 1, (x, y, s) => x * 1000 + 7);
        var series = SeriesReader.Open(dir.Path, Known);
        Assert.Equal("TIFF (tiled)", series.Sections[1].Image!.Format);
        foreach (var section in series.Present)
        {
            var loaded = SectionImageReader.ReadSection(section.FilePath!, new ImageReadOptions { MaxLongSide = 20 });
            Assert.Equal((2.0, 20, 15), (loaded.Downsample, loaded.Image.Width, loaded.Image.Height));
            double offset = section.Number == 2 ? 7 : 0;
            Assert.Equal((1000 * 2.5 + offset) / 65535, loaded.Image[1, 3], 1e-6); // mean of x = 2, 3
        }
    }

    [Fact]
    public void InputsAreNeverModified()
    {
        using var dir = new SectionImageTempFolder();
        SectionImageTestFiles.Gray16Png(dir.File("s1.png"), 30, 20, (x, y) => (ushort)(x * 999 + y));
        SectionImageTestFiles.LibTiff(dir.File("s2.tif"), 30, 20, 16, 1, (x, y, s) => x + y);
        SectionImageTestFiles.LibTiff(dir.File("s3.tif"), 30, 20, 16, 1, (x, y, s) => x * y, tile: null);
        SectionImageTestFiles.LibTiff(dir.File("s5.tif"), 30, 20, 16, 3, (x, y, s) => x + s, planar: true);
        File.WriteAllText(dir.File("manifest.csv"), "#! pixel_size_um = 1\n#! spacing_um = 5\nsection,file\n1,s1.png\n2,s2.tif\n3,s3.tif\n5,s5.tif\n");
        var old = DateTime.UtcNow.AddDays(-3);
        foreach (var f in Directory.GetFiles(dir.Path)) File.SetLastWriteTimeUtc(f, old);
        var before = Snapshot(dir.Path);

        var series = SeriesReader.Open(dir.Path, new SeriesOptions());
        foreach (var s in series.Present)
        {
            SectionImageReader.ReadGray(s.FilePath!);
            SectionImageReader.ReadGray(s.FilePath!, new ImageReadOptions { MaxLongSide = 7, Channel = GrayChannel.Green });
        }

        Assert.Equal(4, series.Present.Count());
        Assert.Equal(before, Snapshot(dir.Path));
    }

    private static List<string> Snapshot(string folder) =>
    [
        .. Directory.GetFiles(folder, "*", SearchOption.AllDirectories).Order(StringComparer.Ordinal).Select(f =>
            $"{f} {new FileInfo(f).Length} {File.GetLastWriteTimeUtc(f):O} {Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(f)))}"),
    ];
}
