using System.Globalization;
using StackBuild.Evaluate;
using StackBuild.Pipeline;
using Xunit;

namespace StackBuild.Tests;

[Collection(ApplyDemoCollection.Name)]
public sealed class PointsCommandTests(ApplyDemoFixture demo)
{
    private static readonly CultureInfo C = CultureInfo.InvariantCulture;

    private string Csv(string name, string text)
    {
        var path = Path.Combine(demo.Folder, name);
        File.WriteAllText(path, text);
        return path;
    }

    private static List<Dictionary<string, string>> ReadCsv(string path)
    {
        var lines = File.ReadAllLines(path);
        var header = lines[0].Split(',');
        return lines.Skip(1).Select(l => header.Zip(l.Split(',')).ToDictionary(p => p.First, p => p.Second)).ToList();
    }

    [Fact]
    public void MarksOnTheTruthPlanesLandWhereTheTruthSaysWithinTheSectionsMeasuredError()
    {
        // evaluate's truth: one map truth plane → (i, j) common to all sections, and each section's error against it.
        var truth = SeriesTruth.Read(Path.Combine(demo.SeriesA, "truth.json"));
        var evaluation = TruthEvaluation.Evaluate(demo.Build.Record, truth);
        var error = evaluation.Sections.ToDictionary(e => e.Number);
        var random = new Random(3);
        var marks = new List<(int Section, double PlaneX, double PlaneY)>();
        var text = new System.Text.StringBuilder("label,section,x,y\n");
        foreach (var s in demo.Build.Record.Sections.Where(s => s.Status == SectionOutcome.Aligned && !s.Damaged))
            for (int m = 0; m < 4; m++)
            {
                // Inside the middle of the plane, where evaluate measures (its points span the middle 80 %).
                double px = truth.PlaneWidth * (0.25 + 0.5 * random.NextDouble()), py = truth.PlaneHeight * (0.25 + 0.5 * random.NextDouble());
                var (x, y) = truth.Sections[s.Number].PlaneToImage.Apply(px, py);
                marks.Add((s.Number, px, py));
                text.Append(C, $"m{marks.Count},{s.Number},{x:R},{y:R}\n");
            }
        Assert.True(marks.Count >= 40, $"{marks.Count} marks");
        var input = Csv("truth-marks.csv", text.ToString());
        var output = Path.Combine(demo.Folder, "truth-marks-in-volume.csv");

        var (code, _, err) = CliRun.Run("points", demo.Paths.Sidecar, "--in", input, "-o", output);

        Assert.True(code == 0, err);
        var rows = ReadCsv(output);
        Assert.Equal(marks.Count, rows.Count);
        for (int n = 0; n < marks.Count; n++)
        {
            var (section, px, py) = marks[n];
            var row = rows[n];
            Assert.Equal($"m{n + 1}", row["label"]); // extra columns carried through
            var (ei, ej) = evaluation.Common.Apply(px, py);
            double off = Math.Sqrt(Math.Pow(double.Parse(row["i"], C) - ei, 2) + Math.Pow(double.Parse(row["j"], C) - ej, 2));
            // The section's measured error is a mean over points across the plane; a mark may lie where a small rotation
            // error is larger, so up to twice that mean, and never below a tenth of a voxel.
            // Measured 2026-12-03: the worst mark lay at 0.64 of this allowance.
            double allowed = Math.Max(2 * error[section].ErrorPx, 0.1);
            Assert.True(off <= allowed, $"section {section}: mark {n + 1} is {off:0.###} voxels from the truth's place (measured error {error[section].ErrorPx:0.###})");
            Assert.Equal(section - 1, double.Parse(row["k"], C)); // demo section n lies in truth plane n − 1, first section at k = 0
        }
    }

    [Fact]
    public void WorldPointsGoBackToTheirSectionAndScanPixel()
    {
        var input = Csv("round.csv", "section,x,y,note\n10,80.25,60.5,\"a, quoted note\"\n14,40,100,\n");
        var forward = Path.Combine(demo.Folder, "round-volume.csv");
        var back = Path.Combine(demo.Folder, "round-back.csv");

        Assert.Equal(0, CliRun.Run("points", demo.Paths.Sidecar, "--in", input, "-o", forward).Code);
        var (code, _, err) = CliRun.Run("points", demo.Paths.Sidecar, "--in", forward, "-o", back, "--inverse");

        Assert.True(code == 0, err);
        var lines = File.ReadAllLines(back);
        Assert.StartsWith("section,x,y,note,i,j,k,x_mm,y_mm,z_mm,nearest_section,scan_x,scan_y,off_plane_mm", lines[0]);
        Assert.Contains("\"a, quoted note\"", lines[1]);
        foreach (var (line, section, x, y) in new[] { (lines[1], 10, 80.25, 60.5), (lines[2], 14, 40.0, 100.0) })
        {
            var f = line.Split(',')[^4..].Select(v => double.Parse(v, C)).ToArray();
            Assert.Equal(section, f[0]);
            Assert.Equal(x, f[1], 1e-6);
            Assert.Equal(y, f[2], 1e-6);
            Assert.Equal(0, f[3], 1e-6);
        }
    }

    [Theory]
    [InlineData("section,x,y\n99,1,2\n", "line 2: the build has no section 99")]
    [InlineData("section,x\n10,1\n", "has no column y")]
    [InlineData("section,x,y\n10,abc,2\n", "line 2: x 'abc' is not a number")]
    [InlineData("section,x,y\n10.5,1,2\n", "line 2: section '10.5' is not a whole section number")]
    [InlineData("", "the file is empty")]
    public void BadMarksGiveOneClearLineAndNoOutput(string csv, string expected)
    {
        var input = Csv("bad-marks.csv", csv);
        var output = Path.Combine(demo.Folder, "bad-marks-out.csv");

        var (code, stdout, err) = CliRun.Run("points", demo.Paths.Sidecar, "--in", input, "-o", output);

        Assert.Equal(1, code);
        var line = Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith($"error: {input}: ", line);
        Assert.Contains(expected, line);
        Assert.Contains(" — ", line); // what to do
        Assert.Equal("", stdout);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void AGapSectionAndAWorldPointWithoutTheirColumnsAreRefused()
    {
        var gap = demo.Build.Record.Sections.First(s => s.Status == SectionOutcome.Gap).Number;
        var input = Csv("gap-mark.csv", $"section,x,y\n{gap},1,2\n");
        var (code, _, err) = CliRun.Run("points", demo.Paths.Sidecar, "--in", input, "-o", Path.Combine(demo.Folder, "gap-out.csv"));
        Assert.Equal(1, code);
        Assert.Contains($"section {gap} has no placement in the build (its status is gap)", err);

        var world = Csv("world-bad.csv", "x_mm,y_mm\n1,2\n");
        (code, _, err) = CliRun.Run("points", demo.Paths.Sidecar, "--in", world, "-o", Path.Combine(demo.Folder, "world-out.csv"), "--inverse");
        Assert.Equal(1, code);
        Assert.Contains("has no column z_mm", err);
    }

    [Fact]
    public void ASidecarThatIsNotOneIsRefused()
    {
        var notSidecar = Csv("not-a-sidecar.json", "{ this is not json");
        var input = Csv("ok.csv", "section,x,y\n10,1,2\n");
        var (code, _, err) = CliRun.Run("points", notSidecar, "--in", input, "-o", Path.Combine(demo.Folder, "x.csv"));
        Assert.Equal(1, code);
        Assert.StartsWith($"error: {notSidecar}: not a StackBuild sidecar", err);
    }
}
