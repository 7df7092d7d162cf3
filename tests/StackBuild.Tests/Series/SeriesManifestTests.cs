using StackBuild.Imaging;
using StackBuild.Series;
using Xunit;
using static StackBuild.Tests.SeriesReaderTests;

namespace StackBuild.Tests;

public class SeriesManifestTests
{
    private static string Manifest(SectionImageTempFolder dir, string text, string name = "manifest.csv")
    {
        var path = dir.File(name);
        File.WriteAllText(path, text);
        return path;
    }

    private const string Flags =
        "\uFEFF# Series of a synthetic phantom\n" +
        "#! pixel_size_um = 4.0\n" +
        "#! SPACING_UM = 50\n" +
        "\n" +
        "Note,File,Section,Mirrored,Exclude,Damaged,pixel_size_um\n" +
        "\"torn, refolded\",b_01.png,1,yes,no,y,\n" +
        ",b_02.png,2,,,,2.5\r\n" +
        "\"lost in \"\"staining\"\"\",,3,,,,\n" +
        "   # a comment between rows\n" +
        "  ,b_04.png,4,NO,yes,0,\n" +
        ",b_06.png,6,n,false,FALSE\n";

    private static SectionImageTempFolder FlagsFolder()
    {
        var dir = new SectionImageTempFolder();
        foreach (var n in new[] { 1, 2, 4, 6 }) Gray8(dir.File($"b_{n:00}.png"));
        Gray8(dir.File("extra_9.png"));
        return dir;
    }

    [Fact]
    public void ManifestGivesOrderFlagsNotesSettingsAndGaps()
    {
        using var dir = FlagsFolder();
        var manifest = Manifest(dir, Flags);
        var series = SeriesReader.Open(dir.Path, new SeriesOptions());

        Assert.Equal(manifest, series.ManifestPath);
        Assert.Equal(Enumerable.Range(1, 6), series.Sections.Select(s => s.Number));
        var (s1, s2, s3, s4, s5, s6) = (series.Sections[0], series.Sections[1], series.Sections[2], series.Sections[3], series.Sections[4], series.Sections[5]);

        Assert.Equal(new SectionEntry(1, dir.File("b_01.png"), 0, 4.0, SectionStatus.Present, true, true, "torn, refolded", new ImageFacts(8, 6, 8, 1, "PNG")), s1 with { Listed = null });
        Assert.Equal(new FileInfo(dir.File("b_01.png")).Length, s1.Listed?.Bytes); // the file as listed, for a check when it is read
        Assert.Equal((SectionStatus.Present, (bool?)null, false, 2.5, 50.0), (s2.Status, s2.MountedMirrored, s2.Damaged, s2.PixelSizeUm, s2.PositionUm));
        Assert.Equal((SectionStatus.Gap, (string?)null, "lost in \"staining\"", 100.0), (s3.Status, s3.FilePath, s3.Note, s3.PositionUm));
        Assert.Equal((SectionStatus.Excluded, dir.File("b_04.png"), (bool?)false, 150.0), (s4.Status, s4.FilePath, s4.MountedMirrored, s4.PositionUm));
        Assert.NotNull(s4.Image);
        Assert.Equal((SectionStatus.Gap, (string?)null, ""), (s5.Status, s5.FilePath, s5.Note));
        Assert.Equal((SectionStatus.Present, (bool?)false, false, 250.0), (s6.Status, s6.MountedMirrored, s6.Damaged, s6.PositionUm));
        Assert.Equal(50, series.SpacingUm);
        Assert.Equal(2.5, series.PixelSizeUm); // the finest of 4.0, 2.5, 4.0
        Assert.Equal([$"{dir.File("extra_9.png")}: is in the folder but not named in manifest.csv, so it is not used — add a row for it if it is a section"],
            series.Warnings);
    }

    [Fact]
    public void OptionsOverrideTheManifest()
    {
        using var dir = FlagsFolder();
        var manifest = Manifest(dir, Flags);
        var series = SeriesReader.Open(dir.Path, new SeriesOptions { PixelSizeUm = 1.0, SpacingUm = 60 });
        Assert.All(series.Sections, s => Assert.Equal(1.0, s.PixelSizeUm));
        Assert.Equal(series.Sections.Select(s => (s.Number - 1) * 60.0), series.Sections.Select(s => s.PositionUm));
        Assert.Equal((60.0, 1.0), (series.SpacingUm, series.PixelSizeUm));
        Assert.Contains($"{manifest}: spacing_um 50 is overridden by --spacing 60", series.Warnings);
        Assert.Contains($"{manifest}: the manifest's pixel sizes are overridden by --pixel-size 1", series.Warnings);
    }

    [Fact]
    public void PositionsAreUsedGapsInterpolatedAndSpacingIsTheMedianStep()
    {
        using var dir = new SectionImageTempFolder();
        foreach (var n in new[] { 1, 2, 4, 5 }) Gray8(dir.File($"a{n}.png"));
        var manifest = Manifest(dir, "section,file,position_um\n1,a1.png,0\n2,a2.png,50\n4,a4.png,150\n5,a5.png,210.5\n", "order.csv");

        // Given as the manifest path itself; steps per number 50, 50, 60.5 → median 50.
        var series = SeriesReader.Open(manifest, new SeriesOptions { PixelSizeUm = 1 });
        Assert.Equal([0, 50, 100, 150, 210.5], series.Sections.Select(s => s.PositionUm));
        Assert.Equal(SectionStatus.Gap, series.Sections[2].Status);
        Assert.Equal(50, series.SpacingUm);

        // Named through the options, next to the folder; a given spacing does not move given positions.
        var named = SeriesReader.Open(dir.Path, new SeriesOptions { ManifestPath = manifest, PixelSizeUm = 1, SpacingUm = 40 });
        Assert.Equal([0, 50, 100, 150, 210.5], named.Sections.Select(s => s.PositionUm));
        Assert.Equal(40, named.SpacingUm);
        Assert.Equal(manifest, named.ManifestPath);
    }

    [Fact]
    public void SettingsOnlyManifestKeepsFilesFoundByName()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s3.png"));
        Gray8(dir.File("s5.png"));
        Manifest(dir, "# settings for this series\n#! pixel_size_um = 3\n#! spacing_um=20\n");
        var series = SeriesReader.Open(dir.Path, new SeriesOptions());
        Assert.Equal([3, 4, 5], series.Sections.Select(s => s.Number));
        Assert.Equal([0, 20, 40], series.Sections.Select(s => s.PositionUm));
        Assert.Equal((20.0, 3.0), (series.SpacingUm, series.PixelSizeUm));

        Gray8(dir.File("t5.png"));
        AssertProblems(() => SeriesReader.Open(dir.Path, new SeriesOptions()),
            $"{dir.File("s5.png")}: has section number 5, as {dir.File("t5.png")} has too — {NamingRemedy}");
    }

    [Fact]
    public void BadRowsAreReportedWithTheirLines()
    {
        using var dir = new SectionImageTempFolder();
        foreach (var n in new[] { 1, 2, 3, 4 }) Gray8(dir.File($"s{n}.png"));
        var m = Manifest(dir,
            "section,file,mirrored,exclude,note\n" +
            "1,s1.png,maybe,,\n" +
            "x,s2.png,,,\n" +
            "3,s3.png,,,\"a, b\",extra\n" +
            "4,s4.png,,,\"unclosed\n" +
            "5,s5.png,,,\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:2: mirrored 'maybe' is not yes or no — write yes or no (or y/n, true/false, 1/0), or leave it empty",
            $"{m}:3: section 'x' is not a whole number of zero or more — give the section number as digits, for example 12",
            $"{m}:4: has 6 values but the header names 5 columns — put double quotes around values that contain commas, or remove the extra values",
            $"{m}:5: a quote opened at column 12 is not closed — a quoted value starts and ends with \" on the same line, with \"\" for a quote inside it",
            $"{m}:6: the file 's5.png' does not exist — check the name (relative to the manifest's folder), or leave file empty for a lost section");
    }

    [Fact]
    public void BadHeaderSettingsAndSeparatorsAreReported()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        var m = Manifest(dir, "#! pixel_size = 4\n#! spacing_um = fifty\nsection,file,mirorred\n1,s1.png,yes\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:1: unknown setting 'pixel_size' — setting lines are '#! pixel_size_um = 4.0' and '#! spacing_um = 50'; start other comments with '#' alone",
            $"{m}:2: spacing_um needs a positive number in micrometres, not 'fifty' — write it as '#! spacing_um = 4.0' (a dot for decimals)",
            $"{m}:3: unknown column 'mirorred' — use only the columns section, file, position_um, pixel_size_um, mirrored, exclude, damaged, note");

        Manifest(dir, "section;file\n1;s1.png\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:1: the header is separated by semicolons — separate the columns with commas (save as 'CSV UTF-8, comma-separated')");

        Manifest(dir, "file,note\ns1.png,\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:1: the header has no 'section' column — the header needs at least: section,file (file empty for a lost section)");

        File.WriteAllBytes(m, [.. "section,file,note\n1,s1.png,"u8, 0xE9, .. "t\u00e9\n"u8]); // Latin-1 é, not UTF-8
        AssertProblems(() => SeriesReader.Open(dir.Path, Known), $"{m}: is not UTF-8 text (another encoding, such as Latin-1) — save it again as CSV with UTF-8 encoding");
    }

    [Fact]
    public void DuplicateSectionsAndPartialPositionsAreReported()
    {
        using var dir = new SectionImageTempFolder();
        foreach (var n in new[] { 1, 2, 3 }) Gray8(dir.File($"s{n}.png"));
        var m = Manifest(dir, "section,file,position_um\n1,s1.png,0\n1,s2.png,10\n3,s3.png,\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:3: section 1 is listed again (file s2.png; line 2 has file s1.png) — give each section number one row",
            $"{m}:4: has no position_um, though other rows give one — give position_um on every row that names a file, or on none");

        Manifest(dir, "section,file,position_um\n1,s1.png,0\n2,s2.png,80\n3,s3.png,40\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{m}:4: position_um 40 does not increase from 80 at section 2 — positions must increase with the section number; check the value");
    }

    [Fact]
    public void ExcludedFileThatCannotBeReadIsOnlyAWarning()
    {
        using var dir = new SectionImageTempFolder();
        Gray8(dir.File("s1.png"));
        File.WriteAllText(dir.File("s2.png"), "broken");
        Manifest(dir, "section,file,exclude\n1,s1.png,no\n2,s2.png,yes\n");
        var series = SeriesReader.Open(dir.Path, Known);
        Assert.Equal(SectionStatus.Excluded, series.Sections[1].Status);
        Assert.Null(series.Sections[1].Image);
        Assert.Equal([$"{dir.File("s2.png")}: is not a readable PNG, TIFF or JPEG image (its header is not recognised) (the section is excluded, so the run goes on)"],
            series.Warnings);

        Manifest(dir, "section,file,exclude\n1,s1.png,yes\n2,,\n");
        AssertProblems(() => SeriesReader.Open(dir.Path, Known),
            $"{dir.File("manifest.csv")}: every section is excluded or lost, so there is nothing to build — set exclude to no for the sections to use");
    }

    [Fact]
    public void CsvFieldsSplitLikeSpreadsheetsWriteThem()
    {
        Assert.True(SeriesManifest.TrySplit(" a , \"b, c\" ,\"\"\"q\"\"\",,", out var fields, out _));
        Assert.Equal(["a", "b, c", "\"q\"", "", ""], fields);
        Assert.False(SeriesManifest.TrySplit("1,\"ab\"c", out _, out var problem));
        Assert.Equal("unexpected text after the closing quote at column 7", problem);
    }
}
