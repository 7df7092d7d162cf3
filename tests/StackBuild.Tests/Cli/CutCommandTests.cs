using System.Text.Json;
using StackBuild.Evaluate;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// <c>stackbuild cut</c>: a truth series from a public volume (ch2bet, Debian mricron-data), checked with nibabel, SciPy and
/// scikit-image (tests/tools/cut_check.py resamples the volume plane through truth.json's map and correlates it with the scan).
/// </summary>
public sealed class CutCommandTests(ITestOutputHelper output) : IDisposable
{
    private static readonly string Ch2Bet = "/usr/share/mricron/templates/ch2bet.nii.gz";
    private readonly string _dir = Directory.CreateTempSubdirectory("sb-cut-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_dir, true); } catch (IOException) { }
    }

    private static (int Code, string Out, string Err) Run(params string[] args) => CliRun.Run(args);

    private static void NeedsVolume()
    {
        if (!File.Exists(Ch2Bet)) Assert.Fail($"{Ch2Bet} is missing: install the Debian package mricron-data (tests/run.sh does this as root)");
    }

    [Fact]
    public void TheWholeExtentIsCutWithLostSectionsNextToBothEnds()
    {
        NeedsVolume();
        var series = Path.Combine(_dir, "coronal");
        var (code, stdout, stderr) = Run("cut", Ch2Bet, series, "--axis", "j", "--every", "3", "--seed", "4");
        output.WriteLine(stdout + stderr);
        Assert.True(code == 0, stderr);
        using var truth = JsonDocument.Parse(File.ReadAllText(Path.Combine(series, "truth.json")));
        var sections = truth.RootElement.GetProperty("sections").EnumerateArray().ToList();
        int n = sections.Count;
        // ch2bet holds brain from coronal plane 20 to 197 (measured with this command, 2026-12-03: the first and last planes with
        // at least 8 voxels above a tenth of the range): every third plane from 20 is 60 sections.
        Assert.Equal(20, sections[0].GetProperty("volume_plane").GetInt32());
        Assert.InRange(sections[^1].GetProperty("volume_plane").GetInt32(), 195, 197);
        Assert.True(sections[1].GetProperty("lost").GetBoolean(), "section 2 is not lost");
        Assert.True(sections[^2].GetProperty("lost").GetBoolean(), $"section {n - 1} is not lost");
        Assert.False(sections[0].GetProperty("lost").GetBoolean());
        Assert.False(sections[^1].GetProperty("lost").GetBoolean());
        int faceDown = sections.Count(s => s.GetProperty("mirrored").GetBoolean());
        Assert.InRange(faceDown, (int)Math.Round(0.1 * n) - 1, (int)Math.Round(0.1 * n) + 1);
        // The end sections are small: a share of a per cent or less of the canvas, against a fifth in the middle.
        Assert.True(sections[0].GetProperty("tissue_share").GetDouble() < 0.01);
        Assert.True(sections.Max(s => s.GetProperty("tissue_share").GetDouble()) > 0.15);
        // Lost sections have no file and appear in the manifest without one; the manifest carries pixel size and spacing.
        var manifest = File.ReadAllLines(Path.Combine(series, "manifest.csv"));
        Assert.Contains("#! pixel_size_um = 1000", manifest);
        Assert.Contains("#! spacing_um = 3000", manifest);
        Assert.Contains("2,,,,,lost during cutting", manifest);
        Assert.Equal(n - sections.Count(s => s.GetProperty("lost").GetBoolean()), Directory.GetFiles(series, "section_*.png").Length);
        // evaluate's reader takes the truth (lost sections left out).
        var read = SeriesTruth.Read(Path.Combine(series, "truth.json"));
        Assert.Equal(n - sections.Count(s => s.GetProperty("lost").GetBoolean()), read.Sections.Count);
        Assert.Contains("Next: stackbuild build", stdout);
    }

    [Theory]
    [InlineData("j", false, 8)]
    [InlineData("k", true, 16)]
    public void EveryScanIsTheVolumePlaneMovedByItsTruthMap(string axis, bool brightField, int bits)
    {
        // Outside check: nibabel reads the volume, SciPy resamples the plane through the inverse of plane_to_image, and
        // the result must correlate with the PNG (read by scikit-image) as well as the noise and gain allow. A map applied
        // the wrong way, a wrong axis order or a missing mirror would correlate far less (a mirrored plane about 0.4 for ch2bet,
        // whose flip correlation is 0.41).
        NeedsVolume();
        var series = Path.Combine(_dir, $"cut-{axis}");
        var args = new List<string> { "cut", Ch2Bet, series, "--axis", axis, "--every", "6", "--seed", "9", "--bits", bits.ToString(), "--face-down", "0.3" };
        if (brightField) args.Add("--bright-field");
        var (code, _, stderr) = Run([.. args]);
        Assert.True(code == 0, stderr);
        var truth = JsonDocument.Parse(File.ReadAllText(Path.Combine(series, "truth.json"))).RootElement.GetProperty("sections")
            .EnumerateArray().Where(s => !s.GetProperty("lost").GetBoolean()).ToList();
        var numbers = new List<int> { truth[0].GetProperty("number").GetInt32(), truth[^1].GetProperty("number").GetInt32() };
        numbers.AddRange(truth.Where(s => s.GetProperty("mirrored").GetBoolean()).Take(2).Select(s => s.GetProperty("number").GetInt32()));
        numbers.Add(truth[truth.Count / 2].GetProperty("number").GetInt32());
        var lines = NiftiPython.Run("cut_check.py", [Ch2Bet, series, .. numbers.Distinct().Select(x => x.ToString())]);
        var results = lines.Split('\n', StringSplitOptions.RemoveEmptyEntries).Select(l => JsonDocument.Parse(l).RootElement).ToList();
        Assert.Equal(numbers.Distinct().Count(), results.Count);
        Assert.Contains(results, r => r.GetProperty("mirrored").GetBoolean());
        foreach (var r in results)
        {
            output.WriteLine(r.ToString());
            // Noise of 2 % of the range and rounding leave r at 0.99 on the large sections (measured 2026-12-03); the small
            // end sections, a few dozen pixels of tissue in a canvas of noise, reach 0.25–0.7. Whatever the size, the scan
            // must match the plane better than the plane turned over.
            Assert.True(r.GetProperty("correlation").GetDouble() > r.GetProperty("turned_over").GetDouble() + 0.02, r.ToString());
        }
        Assert.True(results.Single(r => r.GetProperty("number").GetInt32() == numbers[^1]).GetProperty("correlation").GetDouble() > 0.95);
    }

    [Fact]
    public void ATiltedKnifeCutsTheObliquePlaneTruthJsonDescribes()
    {
        // Outside check: cut_check.py builds the knife's plane from truth.json's tilt_convention on its own (NumPy's two
        // elementary turns, SciPy's 3D map_coordinates on the volume nibabel reads) and correlates it with each scan; the
        // voxel plane itself must match clearly less, or the tilt did nothing.
        NeedsVolume();
        var series = Path.Combine(_dir, "tilted");
        var (code, _, stderr) = Run("cut", Ch2Bet, series, "--axis", "j", "--every", "8", "--seed", "5", "--tilt", "8,-5", "--noise", "0.005");
        Assert.True(code == 0, stderr);
        var root = JsonDocument.Parse(File.ReadAllText(Path.Combine(series, "truth.json"))).RootElement;
        Assert.Equal([8.0, -5.0], root.GetProperty("options").GetProperty("tilt_degrees").EnumerateArray().Select(v => v.GetDouble()));
        var normal = root.GetProperty("plane_normal").EnumerateArray().Select(v => v.GetDouble()).ToArray();
        // R = Rx(8°)·Ry(−5°): its third column (sin ty, −sin tx cos ty, cos tx cos ty), worked out by hand.
        Assert.Equal(Math.Sin(-5 * Math.PI / 180), normal[0], 7); // truth.json rounds to 9 places
        Assert.Equal(-Math.Sin(8 * Math.PI / 180) * Math.Cos(-5 * Math.PI / 180), normal[1], 7);
        var truth = root.GetProperty("sections").EnumerateArray().Where(s => !s.GetProperty("lost").GetBoolean()).ToList();
        var numbers = truth.Skip(truth.Count / 4).Take(3).Select(s => s.GetProperty("number").GetInt32().ToString()).ToList();
        var lines = NiftiPython.Run("cut_check.py", [Ch2Bet, series, .. numbers]);
        var results = lines.Split('\n', StringSplitOptions.RemoveEmptyEntries).Select(l => JsonDocument.Parse(l).RootElement).ToList();
        Assert.Equal(3, results.Count);
        foreach (var r in results)
        {
            output.WriteLine(r.ToString());
            Assert.True(r.GetProperty("correlation").GetDouble() > 0.98, r.ToString());
            // Measured 2026-12-04: 0.9993 against the voxel plane's 0.93–0.95 on sections 6–12.
            Assert.True(r.GetProperty("untilted").GetDouble() < r.GetProperty("correlation").GetDouble() - 0.02, r.ToString());
        }
    }

    [Fact]
    public void BadOptionsAndAForeignFolderAreRefusedWithoutWritingAnything()
    {
        NeedsVolume();
        var (code, _, stderr) = Run("cut", Ch2Bet, Path.Combine(_dir, "x"), "--axis", "q", "--every", "0");
        Assert.Equal(1, code);
        Assert.Contains("--axis q is not a voxel axis", stderr);
        Assert.Contains("--every 0 is below 1", stderr);
        Assert.False(Directory.Exists(Path.Combine(_dir, "x")));

        var foreign = Path.Combine(_dir, "data");
        Directory.CreateDirectory(foreign);
        File.WriteAllText(Path.Combine(foreign, "notes.txt"), "mine");
        (code, _, stderr) = Run("cut", Ch2Bet, foreign, "--every", "8");
        Assert.Equal(1, code);
        Assert.Contains("not empty and was not made by `stackbuild cut`", stderr);
        Assert.Single(Directory.GetFiles(foreign));

        var notVolume = Path.Combine(_dir, "scan.png");
        File.WriteAllBytes(notVolume, [0x89, (byte)'P', (byte)'N', (byte)'G', 13, 10, 26, 10]);
        (code, _, stderr) = Run("cut", notVolume, Path.Combine(_dir, "y"));
        Assert.Equal(1, code);
        Assert.Contains("scan.png: is a PNG image, not a NIfTI-1 volume", stderr);
        Assert.False(Directory.Exists(Path.Combine(_dir, "y")));
    }
}
