using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The whole `stackbuild build` command on small series made here, read back with our NIfTI reader.</summary>
public sealed class BuildCommandTests : IDisposable
{
    private readonly string _dir = Directory.CreateTempSubdirectory("sb-build-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_dir, true); } catch (IOException) { }
    }

    private static (int Code, string Out, string Err) Run(params string[] args) => CliRun.Run(args);

    /// <summary>A gray 8-bit section: bright slide, a dark disc off centre so placement can be checked.</summary>
    private string WriteSection(string folder, string name, int width, int height, int discX, int discY, byte tissue = 60)
    {
        using var image = new Image<L8>(width, height, new L8(230));
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
            if ((x - discX) * (x - discX) + (y - discY) * (y - discY) <= 25) image[x, y] = new L8(tissue);
        var path = Path.Combine(folder, name);
        image.SaveAsPng(path);
        return path;
    }

    private string MakeSeries()
    {
        var folder = Directory.CreateDirectory(Path.Combine(_dir, "series")).FullName;
        WriteSection(folder, "s_001.png", 40, 30, 10, 10);
        WriteSection(folder, "s_002.png", 40, 30, 10, 10);
        // section 3 lost: a gap
        WriteSection(folder, "s_004.png", 50, 30, 10, 10);
        File.WriteAllText(Path.Combine(folder, "manifest.csv"),
            "#! pixel_size_um = 10\n#! spacing_um = 40\nsection,file,mirrored,exclude,damaged,note\n" +
            "1,s_001.png,,,,\n2,s_002.png,yes,,,\n3,,,,,lost\n4,s_004.png,,,,\n");
        return folder;
    }

    [Theory]
    [InlineData(false)]
    [InlineData(true)]
    public void VerboseBuildPrintsOneLinePerStage(bool align)
    {
        var series = MakeSeries();
        var output = Path.Combine(_dir, "verbose.nii.gz");
        var (code, _, stderr) = align ? Run("build", series, "-o", output, "--verbose") : Run("build", series, "-o", output, "--verbose", "--no-align");
        Assert.True(code == 0, stderr);
        var lines = stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        int header = Array.FindIndex(lines, l => l.StartsWith("stage ", StringComparison.Ordinal));
        Assert.True(header >= 0, stderr);
        Assert.Equal(["wall", "s", "cpu", "s", "alloc", "MB", "heap", "MB", "peak", "RSS", "MB"], lines[header].Split(' ', StringSplitOptions.RemoveEmptyEntries)[1..]);
        // Every stage, also those with nothing to do in this build, once and in the order the build runs them.
        string[] stages = ["series", "plan", "prepare", "template slice", "register", "solve", "template place", "frame", "grid", "render", "record", "review", "write"];
        for (int i = 0; i < stages.Length; i++)
        {
            var line = lines[header + 1 + i];
            Assert.StartsWith(stages[i] + " ", line);
            var numbers = line[stages[i].Length..].Split(' ', StringSplitOptions.RemoveEmptyEntries);
            Assert.Equal(5, numbers.Length);
            Assert.All(numbers, n => Assert.True(double.TryParse(n, System.Globalization.NumberStyles.Float, System.Globalization.CultureInfo.InvariantCulture, out var v) && v >= 0, line));
        }
        Assert.StartsWith("all stages ", lines[header + 1 + stages.Length]);
        Assert.StartsWith("command wall time ", lines[header + 2 + stages.Length]);
    }

    [Fact]
    public void BuildWithoutVerbosePrintsNoStages()
    {
        var (code, stdout, stderr) = Run("build", MakeSeries(), "-o", Path.Combine(_dir, "quiet.nii.gz"), "--no-align");
        Assert.True(code == 0, stderr);
        Assert.DoesNotContain("all stages", stdout + stderr);
    }

    [Fact]
    public void BuildWritesVolumeWithGeometryAndSidecar()
    {
        var series = MakeSeries();
        var output = Path.Combine(_dir, "vol.nii.gz");
        var (code, stdout, stderr) = Run("build", series, "-o", output, "--axes", "LIP", "--no-align");
        Assert.True(code == 0, stderr);
        Assert.Contains("NOT aligned", stdout);

        var image = NiftiFile.Read(output);
        Assert.Equal([50, 30, 4], image.Shape);
        Assert.Equal(NiftiDataType.UInt8, image.DataType); // 8-bit input stays 8-bit
        var sizes = image.Affine.VoxelSizes;
        Assert.Equal(0.010, sizes.I, 6); // 10 µm pixels → 0.010 mm
        Assert.Equal(0.010, sizes.J, 6);
        Assert.Equal(0.040, sizes.K, 6); // 40 µm spacing
        Assert.Equal("LIP", image.Affine.AxisCodes.Code);

        var volume = image.ToVolume();
        Assert.All(Enumerable.Range(0, 50 * 30), n => Assert.Equal(0f, volume.Plane(2)[n])); // the gap is an empty plane

        var sidecar = JsonDocument.Parse(File.ReadAllText(Path.Combine(_dir, "vol.json"))).RootElement;
        var sections = sidecar.GetProperty("sections").EnumerateArray().ToList();
        Assert.Equal([1, 2, 3, 4], sections.Select(s => s.GetProperty("number").GetInt32()));
        Assert.Equal(["placed", "placed", "gap", "placed"], sections.Select(s => s.GetProperty("status").GetString()));

        // The matrix maps input pixels to plane voxels: the disc centre of section 1 lands on a dark voxel.
        var m = sections[0].GetProperty("matrix").EnumerateArray().Select(r => r.EnumerateArray().Select(v => v.GetDouble()).ToArray()).ToArray();
        var t = Transform2D.FromRows(m);
        var (i, j) = t.Apply(10, 10);
        Assert.Equal(60f, volume[(int)Math.Round(i), (int)Math.Round(j), 0]);
        // Section 2 is known mounted face down: its matrix mirrors, and the disc lands mirrored.
        var m2 = Transform2D.FromRows(sections[1].GetProperty("matrix").EnumerateArray().Select(r => r.EnumerateArray().Select(v => v.GetDouble()).ToArray()).ToArray());
        Assert.True(m2.IsMirrored);
        var (i2, j2) = m2.Apply(10, 10);
        Assert.Equal(60f, volume[(int)Math.Round(i2), (int)Math.Round(j2), 1]);
        Assert.NotEqual(Math.Round(i), Math.Round(i2));
    }

    [Fact]
    public void TheGlobalSolveSaysHowItWeightedTheSecondNeighbours()
    {
        // The sidecar and the report say how the second-neighbour pairs were weighted, and why: weighted down exactly when
        // the route closures say they disagree with the chain slowly (docs/drift-and-frame.md). Since pairs are polished by
        // NCC (2026-12-03) the demo's do not (slow share 0.09, limit 0.32), so they keep full weight.
        var output = Path.Combine(_dir, "solved.nii.gz");
        var (code, stdout, stderr) = Run("build", RepositoryPaths.DemoSeries, "-o", output, "--smoothing", "0", "--fill", "none");
        Assert.True(code == 0, stderr);
        Assert.Contains("Solve    all pairs at once (--smoothing 0).", stdout);
        Assert.Contains("--template removes", stdout);
        Assert.Contains("Sections 54 aligned, 1 excluded, 5 gaps", stdout);
        // The torn section 4 is mounted wrong side up by the chain (truth.json); the build cannot know that, but says
        // its side is uncertain because the turned-over hypothesis scored close.
        Assert.Matches(@"section 4: low registration confidence \(0\.[0-4]\d\); which side is up is uncertain", stdout);
        // Without a template every section carries the chain's slow drift in its estimate (docs/uncertainty.md); those
        // flagged for nothing else are listed in one line as runs of numbers, after the sections with a trouble of their own.
        Assert.Matches(@"\nCheck    sections 1–3, 5–[\d–, ]+: estimated placement error above 2 voxels \(without a template", stdout);
        Assert.True(stdout.IndexOf("Check    section 4:", StringComparison.Ordinal) < stdout.IndexOf("Check    sections 1–3", StringComparison.Ordinal));
        var parameters = JsonDocument.Parse(File.ReadAllText(Path.Combine(_dir, "solved.json"))).RootElement.GetProperty("parameters");
        string closure = parameters.GetProperty("route_closure_slow_share").GetString()!;
        Assert.Matches(@"^0\.\d+, limit 0\.\d+$", closure);
        var parts = closure.Split(", limit ").Select(v => double.Parse(v, System.Globalization.CultureInfo.InvariantCulture)).ToArray();
        Assert.Equal(parts[0] > parts[1] ? "0.01" : "1", parameters.GetProperty("second_neighbour_weight").GetString());
        string report = File.ReadAllText(Path.Combine(_dir, "solved.report.html"));
        Assert.Contains("route closure slow share", report);
        // The report shows thumbnails for the sections with a trouble of their own (section 4) and lists the drift-only ones.
        Assert.Matches(@"class=""estimate-only"">Flagged only for an estimated placement error above 2 voxels \(without a template[^<]*: sections 1–3, 5–", report);
        Assert.InRange(System.Text.RegularExpressions.Regex.Matches(report, @"class=""flag""").Count, 1, 5);
    }

    [Fact]
    public void BadSeriesGivesOneLinePerProblemAndWritesNothing()
    {
        var folder = Directory.CreateDirectory(Path.Combine(_dir, "bad")).FullName;
        WriteSection(folder, "a_001.png", 20, 20, 5, 5);
        WriteSection(folder, "b_001.png", 20, 20, 5, 5); // duplicate number 1
        File.WriteAllText(Path.Combine(folder, "c_002.png"), "this is not an image");
        var output = Path.Combine(_dir, "out.nii.gz");
        var (code, _, stderr) = Run("build", folder, "-o", output, "--pixel-size", "5", "--spacing", "20");
        Assert.Equal(1, code);
        var lines = stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.Contains(lines, l => l.StartsWith("error:") && l.Contains("b_001.png"));
        Assert.Contains(lines, l => l.StartsWith("error:") && l.Contains("c_002.png"));
        Assert.False(File.Exists(output));
        Assert.Empty(Directory.GetFiles(_dir)); // no partial or temporary files beside the output
    }

    [Fact]
    public void ImageThatFailsToDecodeDuringTheBuildIsOneLine()
    {
        var series = MakeSeries();
        var png = File.ReadAllBytes(Path.Combine(series, "s_002.png"));
        File.WriteAllBytes(Path.Combine(series, "s_002.png"), png.AsSpan(0, 60).ToArray()); // header intact, data cut off
        var output = Path.Combine(_dir, "cut.nii.gz");
        var (code, _, stderr) = Run("build", series, "-o", output);
        Assert.NotEqual(0, code);
        var lines = stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.All(lines, l => Assert.StartsWith("error:", l));
        Assert.Contains(lines, l => l.Contains("s_002.png"));
        Assert.DoesNotContain("   at ", stderr); // no stack trace
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void TinySectionsAreRefusedWithAReason()
    {
        var folder = Directory.CreateDirectory(Path.Combine(_dir, "tiny")).FullName;
        for (int n = 1; n <= 3; n++) WriteSection(folder, $"s_{n:000}.png", 3, 2, 1, 1);
        var (code, _, stderr) = Run("build", folder, "-o", Path.Combine(_dir, "tiny.nii.gz"), "--pixel-size", "20", "--spacing", "50");
        Assert.Equal(1, code);
        Assert.Contains("too small to register", stderr);
        Assert.DoesNotContain("   at ", stderr);
    }

    [Fact]
    public void AGridWiderThanNiftiStoresIsOneLineWithASizeThatFits()
    {
        // 40 × 30 px at 10 µm drawn at 0.01 µm: over 40,000 voxels across, past NIfTI-1's 32767 per axis (its dim fields are
        // 16-bit; NIfTI-1 standard, nifti1.h). Refused with the option named and a size that fits, nothing written.
        var folder = MakeSeries();
        var output = Path.Combine(_dir, "wide.nii.gz");
        var (code, _, stderr) = Run("build", folder, "-o", output, "--output-pixel-size", "0.01");
        Assert.Equal(1, code);
        Assert.Contains("more than NIfTI-1 stores (32767 per axis)", stderr);
        Assert.Contains("--output-pixel-size (at least", stderr);
        Assert.DoesNotContain("   at ", stderr);
        Assert.Single(stderr.Trim().Split('\n'), l => l.StartsWith("error:", StringComparison.Ordinal));
        Assert.Empty(Directory.GetFiles(_dir, "wide*"));
    }

    [Fact]
    public void MissingOutputFolderIsFoundBeforeTheBuild()
    {
        var series = MakeSeries();
        var (code, _, stderr) = Run("build", series, "-o", Path.Combine(_dir, "no-such-folder", "v.nii.gz"));
        Assert.Equal(1, code);
        Assert.Contains("folder for this output does not exist", stderr);
        Directory.CreateDirectory(Path.Combine(_dir, "clash.json")); // a folder where the sidecar would go
        (code, _, stderr) = Run("build", series, "-o", Path.Combine(_dir, "clash.nii.gz"));
        Assert.Equal(1, code);
        Assert.Contains("replace a folder", stderr);
        Assert.False(File.Exists(Path.Combine(_dir, "clash.nii.gz")));
    }

    [Fact]
    public void DamagedSidecarIsRefusedByEvaluate()
    {
        var sidecar = Path.Combine(_dir, "bad.json");
        File.WriteAllText(sidecar, "{\"sections\":[{\"number\":1,\"status\":\"aligned\",\"matrix\":[[1,0],[0,1]]}]}");
        var truth = Path.Combine(RepositoryPaths.DemoSeries, "truth.json");
        var (code, _, stderr) = Run("evaluate", sidecar, "--truth", truth);
        Assert.Equal(1, code);
        Assert.Contains("not 3×3", stderr);
    }

    [Theory]
    [InlineData("vol.nrrd", "must be a NIfTI-1 file")]
    [InlineData("vol.nii.gz", "--axes")]
    public void BadOptionsAreOneLine(string outputName, string expected)
    {
        var series = MakeSeries();
        var (code, _, stderr) = Run("build", series, "-o", Path.Combine(_dir, outputName), "--axes", outputName.EndsWith(".gz") ? "RRP" : "RIP");
        Assert.Equal(1, code);
        Assert.Contains(expected, stderr);
        Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries));
    }

    [Theory]
    [InlineData("--centre", "1,2", "--centre")]
    [InlineData("--centre", "a,b,c", "--centre")]
    [InlineData("--margin", "-5", "--margin")]
    [InlineData("--rotate", "NaN", "--rotate")]
    [InlineData("--template-axis", "x", "--template-axis")]
    [InlineData("--voxel-size", "0", "--voxel-size")]
    [InlineData("--reference", "99", "--reference 99")]
    public void FrameAndTemplateOptionsAreCheckedWithTheOptionNamed(string option, string value, string named)
    {
        var series = MakeSeries();
        var output = Path.Combine(_dir, "vol.nii.gz");
        string[] extra = option == "--template-axis" ? ["--template", Path.Combine(_dir, "none.nii.gz")] : [];
        var (code, _, stderr) = Run(["build", series, "-o", output, option, value, .. extra]);
        Assert.Equal(1, code);
        var lines = stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.Single(lines);
        Assert.Contains(named, lines[0]);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void TemplateRefusesTheOptionsThatChooseAFrame()
    {
        var series = MakeSeries();
        var output = Path.Combine(_dir, "vol.nii.gz");
        var (code, _, stderr) = Run("build", series, "-o", output, "--template", Path.Combine(_dir, "t.nii.gz"), "--rotate", "90", "--mirror");
        Assert.Equal(1, code);
        Assert.Contains("--rotate, --mirror cannot be combined with --template", stderr);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void MissingPixelSizeSaysHowToGiveIt()
    {
        var folder = Directory.CreateDirectory(Path.Combine(_dir, "nopx")).FullName;
        WriteSection(folder, "s_001.png", 20, 20, 5, 5);
        WriteSection(folder, "s_002.png", 20, 20, 5, 5);
        var (code, _, stderr) = Run("build", folder, "-o", Path.Combine(_dir, "v.nii"), "--spacing", "20");
        Assert.Equal(1, code);
        Assert.Contains("--pixel-size", stderr);
    }
}

/// <summary>The version line names the FFT in use.</summary>
public class VersionTests
{
    [Fact]
    public void VersionNamesTheFft()
    {
        var o = new StringWriter();
        int code = Cli.Program.Run(["--version"], o, new StringWriter());
        Assert.Equal(0, code);
        Assert.Contains("FFT: ", o.ToString());
        Assert.Contains("not for clinical use", o.ToString());
    }

    [Fact]
    public void UsageErrorsAreOneLineEach()
    {
        var e = new StringWriter();
        int code = Cli.Program.Run(["build", "somewhere"], new StringWriter(), e);
        Assert.Equal(2, code);
        var lines = e.ToString().Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.Single(lines);
        Assert.Contains("--output", lines[0]);
        Assert.Contains("stackbuild build --help", lines[0]);
    }

    [Fact]
    public void NoArgumentsShowsTheHelp()
    {
        var o = new StringWriter();
        Assert.Equal(0, Cli.Program.Run([], o, new StringWriter()));
        Assert.Contains("build", o.ToString());
        Assert.Contains("not for clinical use", o.ToString());
    }
}
