using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Pipeline;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// --upright on a whole build: axial planes of the public ch2 MRI template (Debian mricron-data) written as a series
/// of scans, each turned and shifted at random, rebuilt with the frame of a section that lay turned by 35°.
/// The template's mid-sagittal plane is x = 0 (common practice for MNI-space templates), so in its axial planes the
/// midline is vertical: after --upright the reference section must be back near its template orientation.
/// </summary>
public sealed class UprightBuildTests(ITestOutputHelper output) : IDisposable
{
    private readonly string _dir = Directory.CreateTempSubdirectory("sb-upright-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_dir, true); } catch (IOException) { }
    }

    /// <summary>Writes the series; returns each section's move (template plane pixels → scan pixels).</summary>
    private Transform2D[] WriteSeries(int count)
    {
        var v = RegisterMriTests.Template();
        var rng = new Random(20261202);
        var moves = new Transform2D[count];
        var lines = new List<string> { "#! pixel_size_um = 1000", "#! spacing_um = 4000", "section,file" };
        for (int n = 0; n < count; n++)
        {
            var plane = RegisterMriTests.Section(v, 45 + 4 * n, marker: false);
            double angle = n == 0 ? 35 : rng.NextDouble() * 120 - 60;
            double c = (plane.Width - 1) / 2.0;
            moves[n] = Transform2D.Rotation(angle, c, c).Then(Transform2D.Translation(rng.NextDouble() * 30 - 15, rng.NextDouble() * 30 - 15));
            var scan = Resampler.Warp(plane, moves[n].Inverse(), plane.Width, plane.Height, 0f);
            string name = $"s{n + 1:00}.png";
            SectionImageTestFiles.Gray16Png(Path.Combine(_dir, name), scan.Width, scan.Height,
                (x, y) => (ushort)Math.Clamp(Math.Round(scan[x, y] * 60000), 0, 65535));
            lines.Add($"{n + 1},{name}");
        }
        File.WriteAllLines(Path.Combine(_dir, "manifest.csv"), lines);
        return moves;
    }

    private static Transform2D Matrix(SectionRecord s) =>
        new(s.Matrix![0][0], s.Matrix[0][1], s.Matrix[0][2], s.Matrix[1][0], s.Matrix[1][1], s.Matrix[1][2]);

    private static double Wrap90(double degrees) => degrees - 180 * Math.Round(degrees / 180);

    [Fact]
    public void UprightTurnsTheMriBackToItsMidlineAndPlainBuildKeepsTheScannedTurn()
    {
        var moves = WriteSeries(16);
        var plain = BuildPipeline.Run(new BuildOptions { Input = _dir, Frame = new FrameOptions { ReferenceSection = 1 } });
        var upright = BuildPipeline.Run(new BuildOptions { Input = _dir, Frame = new FrameOptions { ReferenceSection = 1, Upright = true } });

        // Template plane → output plane for the reference section: its turn is what the frame did to the specimen.
        double plainTurn = moves[0].Then(Matrix(plain.Record.Sections[0])).RotationDegrees;
        double uprightTurn = moves[0].Then(Matrix(upright.Record.Sections[0])).RotationDegrees;
        var u = upright.Record.Frame!.Upright!;
        output.WriteLine($"plain frame: template turned {plainTurn:0.###}°; upright frame: {uprightTurn:0.###}° (upright turn {u.AngleDegrees:0.###}°, symmetry {u.Symmetry:0.###}, runner-up {u.RunnerUpSymmetry:0.###}, {u.SectionsUsed} sections)");

        Assert.InRange(plainTurn, 34, 36);
        // The template itself leans about 0.5° (measured by MidlineTests); 1.5° leaves room for that and the alignment.
        Assert.True(Math.Abs(Wrap90(uprightTurn)) <= 1.5, $"upright build leaves the template turned by {uprightTurn:0.##}°");
        Assert.True(u.Symmetry > u.RunnerUpSymmetry);
        Assert.Equal(16, upright.Record.Sections.Count(s => s.Status == SectionOutcome.Aligned));
    }

    [Fact]
    public void UprightOnAnAsymmetricSeriesIsRefusedWithTheReason()
    {
        // Smooth random blobs: no mirror axis at all.
        var lines = new List<string> { "#! pixel_size_um = 10", "#! spacing_um = 20", "section,file" };
        for (int n = 1; n <= 4; n++)
        {
            var tissue = RegisterTestImages.Tissue(160, 160, seed: 7);
            string name = $"b{n}.png";
            SectionImageTestFiles.Gray8Png(Path.Combine(_dir, name), 160, 160, (x, y) => (byte)Math.Clamp(tissue[x, y] * 255, 0, 255));
            lines.Add($"{n},{name}");
        }
        File.WriteAllLines(Path.Combine(_dir, "manifest.csv"), lines);
        var e = Assert.Throws<InputProblemException>(() => BuildPipeline.Run(new BuildOptions { Input = _dir, Frame = new FrameOptions { Upright = true } }));
        output.WriteLine(e.Message);
        Assert.Contains("--upright", e.Message);
        Assert.Contains("--rotate", e.Message);
    }
}
