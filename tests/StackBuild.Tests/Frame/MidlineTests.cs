using System.Diagnostics;
using System.Text.Json;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The midline (symmetry axis) of a stack of aligned sections: a real MRI turned by SciPy, synthetic phantoms
/// that are symmetric by construction about a known line, asymmetric input, and empty input.
/// </summary>
public class MidlineTests(ITestOutputHelper output)
{
    /// <summary>Axial planes of the ch2 template (Debian mricron-data), 300×300, every 4th plane over the brain (45…125).</summary>
    private static List<GrayImage> MriPlanes()
    {
        var v = RegisterMriTests.Template();
        return Enumerable.Range(0, 21).Select(i => RegisterMriTests.Section(v, 45 + 4 * i, marker: false)).ToList();
    }

    /// <summary>
    /// The ch2 template is a brain in MNI space, whose mid-sagittal plane is the plane x = 0 (common practice for
    /// MNI-space templates): in its axial planes the midline is a vertical line. The planes are turned by SciPy
    /// (scipy.ndimage.rotate, Debian python3-scipy, the outside reference); the angle SciPy turned them by, in our
    /// convention, is read from a probe SciPy moved the same way, so the sign does not rest on memory.
    /// </summary>
    [Fact]
    public void Mri_planes_turned_by_scipy_give_back_the_turn()
    {
        var planes = MriPlanes();
        int w = planes[0].Width, h = planes[0].Height;
        var upright = Timed(() => Midline.Estimate(planes), out double uprightSeconds);
        output.WriteLine($"unturned: angle {upright.AngleDegrees:0.000}°, centre ({upright.CentreX:0.00}, {upright.CentreY:0.00}), symmetry {upright.Symmetry:0.000}, runner-up {upright.RunnerUpSymmetry:0.000}, clear {upright.Clear}, {planes.Count} planes {w}×{h} in {uprightSeconds:0.00} s");
        Assert.True(upright.Clear, upright.Problem);
        Assert.True(Math.Abs(upright.AngleDegrees) < 1.0, $"the unturned template's midline is {upright.AngleDegrees:0.00}° from vertical");

        var input = Path.Combine(Path.GetTempPath(), $"midline-{Guid.NewGuid():N}.f32");
        var turned = input + ".turned";
        try
        {
            WriteStack(input, planes);
            foreach (double scipyDegrees in new[] { -35.0, 12.0, 80.0 })
            {
                var json = NiftiPython.Run("scipy_rotate_planes.py", input, planes.Count.ToString(), h.ToString(), w.ToString(),
                    scipyDegrees.ToString(System.Globalization.CultureInfo.InvariantCulture), turned);
                var (turn, cx, cy) = ProbeTurn(JsonDocument.Parse(json).RootElement);
                var stack = ReadStack(turned, planes.Count, w, h);
                var r = Timed(() => Midline.Estimate(stack), out double seconds);
                // Content turned by `turn` needs −turn back, plus the unturned template's own small lean.
                double expected = Wrap90(upright.AngleDegrees - turn);
                double angleError = Wrap90(r.AngleDegrees - expected);
                // The unturned midline point, carried by SciPy's turn, must lie on the found midline.
                var moved = Transform2D.Rotation(turn, cx, cy).Apply(upright.CentreX, upright.CentreY);
                double lineError = DistanceToLine(r, moved.X, moved.Y);
                output.WriteLine($"SciPy angle {scipyDegrees,6:0.0}° (our turn {turn,7:0.000}°): found {r.AngleDegrees,8:0.000}°, expected {expected,8:0.000}°, " +
                                 $"error {angleError,6:0.000}°, midline off the carried point by {lineError:0.00} px, symmetry {r.Symmetry:0.000}, runner-up {r.RunnerUpSymmetry:0.000}, {seconds:0.00} s");
                Assert.True(r.Clear, r.Problem);
                Assert.True(Math.Abs(angleError) <= 1.0, $"angle error {angleError:0.000}° for SciPy's {scipyDegrees}°");
                Assert.True(lineError <= 1.5, $"the midline misses the carried point by {lineError:0.00} px");
            }
        }
        finally
        {
            File.Delete(input);
            File.Delete(turned);
        }
    }

    public static TheoryData<int, int, double, double, double> PhantomCases => new()
    {
        // image width, height, axis direction (degrees from +x towards +y), a point on the axis (x, y)
        { 256, 256, 113.7, 140.3, 121.6 },
        { 240, 256, 71.2, 118.8, 131.4 },
        { 256, 256, 2.5, 127.5, 109.2 },
    };

    /// <summary>
    /// A synthetic phantom symmetric by construction: each plane is a sum of smooth shapes placed in mirror pairs
    /// about a known line (an analytic truth), sampled at pixel centres. The found axis must match within 0.1°
    /// and pass within 0.5 px of the true line.
    /// </summary>
    [Theory]
    [MemberData(nameof(PhantomCases))]
    public void Symmetric_phantom_gives_its_axis(int width, int height, double axisDegrees, double px, double py)
    {
        var planes = Enumerable.Range(0, 16).Select(k => SymmetricPhantom(width, height, axisDegrees, px, py, seed: 100 + k)).ToList();
        var r = Timed(() => Midline.Estimate(planes), out double seconds);
        double axisError = Wrap90(r.AxisDegrees - axisDegrees);
        double expectedAngle = Wrap90(90 - axisDegrees);
        double lineError = DistanceToTrueLine(r.CentreX, r.CentreY, axisDegrees, px, py);
        output.WriteLine($"{width}×{height}, axis {axisDegrees}°: found {r.AxisDegrees:0.0000}° (error {axisError:0.0000}°), angle {r.AngleDegrees:0.000}° (expected {expectedAngle:0.000}°), " +
                         $"centre ({r.CentreX:0.00}, {r.CentreY:0.00}) {lineError:0.000} px off the true line, symmetry {r.Symmetry:0.000}, runner-up {r.RunnerUpSymmetry:0.000}, {seconds:0.00} s");
        Assert.True(r.Clear, r.Problem);
        Assert.True(Math.Abs(axisError) <= 0.1, $"axis error {axisError:0.000}°");
        Assert.True(Math.Abs(Wrap90(r.AngleDegrees - expectedAngle)) <= 0.1);
        Assert.InRange(r.AngleDegrees, -90 + 1e-9, 90);
        Assert.True(lineError <= 0.5, $"the found centre is {lineError:0.000} px off the true axis");
        Assert.Equal(planes.Count, r.PlanesUsed);

        // Upright must carry the midline onto the vertical line through the centre: a point on the true axis
        // 50 px from the true point lands on x = CentreX.
        double a = axisDegrees * Math.PI / 180;
        var p = r.Upright.Apply(px + 50 * Math.Cos(a), py + 50 * Math.Sin(a));
        output.WriteLine($"  a point on the true axis goes to x = {p.X:0.00} (midline at x = {r.CentreX:0.00})");
        Assert.True(Math.Abs(p.X - r.CentreX) <= 0.6, $"upright puts the axis point at x = {p.X:0.00}, not {r.CentreX:0.00}");
    }

    /// <summary>Random smooth blobs at random places have no mirror axis: the result must say so, not guess.</summary>
    [Fact]
    public void Asymmetric_blobs_are_not_clear()
    {
        var rng = new Random(7);
        var planes = Enumerable.Range(0, 16).Select(_ => RandomBlobs(256, 256, rng)).ToList();
        var r = Midline.Estimate(planes);
        output.WriteLine($"asymmetric: symmetry {r.Symmetry:0.000}, runner-up {r.RunnerUpSymmetry:0.000}, clear {r.Clear}, problem: {r.Problem}");
        Assert.False(r.Clear);
        Assert.NotNull(r.Problem);
        Assert.True(r.Symmetry < new MidlineOptions().MinSymmetry, $"symmetry {r.Symmetry:0.000}");
        Assert.Contains("not symmetric enough", r.Problem);
    }

    /// <summary>
    /// A phantom symmetric about two perpendicular lines (round body, shapes in fours) has no one midline: the
    /// result must call it ambiguous rather than pick one.
    /// </summary>
    [Fact]
    public void Two_mirror_axes_are_ambiguous()
    {
        var planes = Enumerable.Range(0, 12).Select(k => SymmetricPhantom(200, 200, 30, 99.5, 99.5, seed: k, bothAxes: true)).ToList();
        var r = Midline.Estimate(planes);
        output.WriteLine($"two axes: axis {r.AxisDegrees:0.00}°, symmetry {r.Symmetry:0.000}, runner-up {r.RunnerUpSymmetry:0.000}, clear {r.Clear}, problem: {r.Problem}");
        Assert.False(r.Clear);
        Assert.Contains("ambiguous", r.Problem);
        Assert.True(r.Symmetry >= new MidlineOptions().MinSymmetry);
    }

    /// <summary>No planes, all-zero, flat and NaN planes: an unclear result with a reason, never an exception.</summary>
    [Fact]
    public void Empty_and_flat_planes_are_handled()
    {
        var none = Midline.Estimate([]);
        output.WriteLine($"no planes: {none.Problem}");
        Assert.False(none.Clear);
        Assert.Equal(0, none.PlanesUsed);

        var flat = new List<GrayImage>
        {
            new(64, 48),
            new(64, 48, Enumerable.Repeat(0.7f, 64 * 48).ToArray()),
            new(64, 48, Enumerable.Repeat(float.NaN, 64 * 48).ToArray()),
        };
        var r = Midline.Estimate(flat);
        output.WriteLine($"flat planes: {r.Problem}");
        Assert.False(r.Clear);
        Assert.Equal(0, r.PlanesUsed);
        Assert.Contains("holds tissue", r.Problem);
        Assert.Equal(0, r.AngleDegrees);
        Assert.Equal(r.Upright, Transform2D.Rotation(0, r.CentreX, r.CentreY));

        // Flat planes among good ones take no part and do not spoil the answer; a zero weight leaves a plane out.
        var mixed = Enumerable.Range(0, 8).Select(k => SymmetricPhantom(128, 128, 97, 66, 60, seed: k)).Concat(
            [new GrayImage(128, 128), new GrayImage(128, 128, Enumerable.Repeat(3f, 128 * 128).ToArray())]).ToList();
        var weights = Enumerable.Repeat(1.0, mixed.Count).ToArray();
        weights[0] = 0;
        var m = Midline.Estimate(mixed, weights);
        output.WriteLine($"mixed: axis {m.AxisDegrees:0.000}°, {m.PlanesUsed} planes used, symmetry {m.Symmetry:0.000}");
        Assert.True(m.Clear, m.Problem);
        Assert.Equal(7, m.PlanesUsed);
        Assert.True(Math.Abs(m.AxisDegrees - 97) <= 0.2, $"axis {m.AxisDegrees:0.000}°");

        Assert.Throws<ArgumentException>(() => Midline.Estimate([new GrayImage(10, 10), new GrayImage(11, 10)]));
        Assert.Throws<ArgumentException>(() => Midline.Estimate([new GrayImage(10, 10)], [1.0, 2.0]));
    }

    // ---- helpers ----

    private static MidlineResult Timed(Func<MidlineResult> run, out double seconds)
    {
        var sw = Stopwatch.StartNew();
        var r = run();
        seconds = sw.Elapsed.TotalSeconds;
        return r;
    }

    /// <summary>An angle difference brought into (−90°, 90°] (a line's direction is defined modulo 180°).</summary>
    private static double Wrap90(double degrees)
    {
        double d = ((degrees % 180) + 180) % 180;
        return d > 90 ? d - 180 : d;
    }

    /// <summary>Distance from (x, y) to the midline of <paramref name="r"/>.</summary>
    private static double DistanceToLine(MidlineResult r, double x, double y) => DistanceToTrueLine(x, y, r.AxisDegrees, r.CentreX, r.CentreY);

    private static double DistanceToTrueLine(double x, double y, double axisDegrees, double px, double py)
    {
        double a = axisDegrees * Math.PI / 180;
        return Math.Abs(-(x - px) * Math.Sin(a) + (y - py) * Math.Cos(a));
    }

    /// <summary>
    /// SciPy's turn in our convention (degrees, positive turning +x towards +y) and its centre, from where it
    /// carried the probe: the change in the probe's direction as seen from the centre.
    /// </summary>
    private static (double Turn, double Cx, double Cy) ProbeTurn(JsonElement e)
    {
        double X(string name, int i) => e.GetProperty(name)[i].GetDouble();
        double cx = X("centre", 0), cy = X("centre", 1);
        double before = Math.Atan2(X("probe_before", 1) - cy, X("probe_before", 0) - cx);
        double after = Math.Atan2(X("probe_after", 1) - cy, X("probe_after", 0) - cx);
        double turn = (after - before) * 180 / Math.PI;
        return (((turn + 180) % 360 + 360) % 360 - 180, cx, cy);
    }

    private static void WriteStack(string path, List<GrayImage> planes)
    {
        using var writer = new BinaryWriter(File.Create(path));
        foreach (var p in planes) foreach (var v in p.Pixels) writer.Write(v);
    }

    private static List<GrayImage> ReadStack(string path, int count, int w, int h)
    {
        using var reader = new BinaryReader(File.OpenRead(path));
        var planes = new List<GrayImage>();
        for (int k = 0; k < count; k++)
        {
            var px = new float[w * h];
            for (int i = 0; i < px.Length; i++) px[i] = reader.ReadSingle();
            planes.Add(new GrayImage(w, h, px));
        }
        return planes;
    }

    /// <summary>
    /// A smooth elliptical body with inner shapes in mirror pairs about the line through (px, py) with direction
    /// <paramref name="axisDegrees"/>: intensity depends on |u| (distance across the line) and v (along it) only,
    /// so the sampled image is symmetric about that line exactly.
    /// </summary>
    /// <remarks>With <paramref name="bothAxes"/> the body is an ellipse and intensity depends on |v| too: symmetric about the perpendicular line as well.</remarks>
    internal static GrayImage SymmetricPhantom(int width, int height, double axisDegrees, double px, double py, int seed, bool bothAxes = false)
    {
        var rng = new Random(seed);
        double a = axisDegrees * Math.PI / 180, ax = Math.Cos(a), ay = Math.Sin(a), nx = -ay, ny = ax;
        double scale = Math.Min(width, height) / 256.0;
        double halfWidth = (70 + 10 * rng.NextDouble()) * scale, halfLength = (95 + 10 * rng.NextDouble()) * scale;
        var blobs = Enumerable.Range(0, 9).Select(_ => (
            U: rng.NextDouble() * 50 * scale, V: (rng.NextDouble() * 2 - 1) * 70 * scale,
            S: (4 + rng.NextDouble() * 9) * scale, A: rng.NextDouble() * 1.2 - 0.5)).ToArray();
        var img = new GrayImage(width, height);
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            double u = Math.Abs((x - px) * nx + (y - py) * ny), v = (x - px) * ax + (y - py) * ay;
            if (bothAxes) v = Math.Abs(v);
            // An egg-shaped body (wider at one end along the axis), so only one axis is a mirror axis.
            double widthHere = bothAxes ? halfWidth : halfWidth * (1 + 0.25 * v / halfLength);
            double r = Math.Sqrt(u * u / (widthHere * widthHere) + v * v / (halfLength * halfLength));
            double value = 1 / (1 + Math.Exp((r - 1) / 0.03));
            foreach (var b in blobs)
            {
                double du = u - b.U, dv = v - b.V;
                value += b.A * Math.Exp(-(du * du + dv * dv) / (2 * b.S * b.S));
            }
            img[x, y] = (float)(0.1 + value);
        }
        return img;
    }

    private static GrayImage RandomBlobs(int width, int height, Random rng)
    {
        var blobs = Enumerable.Range(0, 12).Select(_ => (X: 30 + rng.NextDouble() * (width - 60), Y: 30 + rng.NextDouble() * (height - 60),
            S: 5 + rng.NextDouble() * 20, A: 0.3 + rng.NextDouble())).ToArray();
        var img = new GrayImage(width, height);
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            double value = 0;
            foreach (var b in blobs) value += b.A * Math.Exp(-((x - b.X) * (x - b.X) + (y - b.Y) * (y - b.Y)) / (2 * b.S * b.S));
            img[x, y] = (float)value;
        }
        return img;
    }
}
