using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Template;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Section-to-template registration by mutual information, on planes of the Colin27 "ch2" MRI template (Debian
/// mricron-data) given a new contrast, noise and a known rigid move (truth: the move the test applied).
/// </summary>
public class TemplateRegistrationTests(ITestOutputHelper output)
{
    private static readonly Lazy<TemplateVolume> Template = new(() => TemplateVolume.Load(RegisterMriTests.TemplatePath, 'k'));

    /// <summary>An axial template plane at 1 mm; and a "section": the plane's grey levels remapped by <paramref name="contrast"/>, noised, moved by <paramref name="move"/> onto a 256² canvas.</summary>
    internal static (GrayImage Slice, GrayImage Section) Case(double k, Transform2D move, Func<float, float> contrast, double noise, int seed)
    {
        var slice = Template.Value.Slice(k, 1.0, out _);
        float max = slice.Pixels.Max();
        var remapped = new GrayImage(slice.Width, slice.Height);
        for (int i = 0; i < remapped.Pixels.Length; i++) remapped.Pixels[i] = contrast(slice.Pixels[i] / max);
        var section = RegisterTestImages.Move(remapped, move, 256, 256, contrast(0));
        var random = new Random(seed);
        for (int i = 0; i < section.Pixels.Length; i++)
            section.Pixels[i] += (float)(noise * Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble()));
        return (slice, section);
    }

    /// <summary>Distance at the section's tissue (image) centre and angle between two section-to-slice maps.</summary>
    internal static (double Px, double Degrees) Error(Transform2D estimate, Transform2D truth, double x, double y)
    {
        var (ax, ay) = estimate.Apply(x, y);
        var (bx, by) = truth.Apply(x, y);
        return (double.Hypot(ax - bx, ay - by), RegisterTestImages.AngleError(estimate.RotationDegrees, truth.RotationDegrees));
    }

    [Fact]
    public void MutualInformationMatchesNumpyHistogram2d()
    {
        var (slice, section) = Case(80, Transform2D.Identity, v => 1 - MathF.Pow(v, 0.7f), 0.03, seed: 4);
        // Same size, identity map: every section pixel samples the slice at a pixel centre, so no interpolation enters.
        var cropped = new GrayImage(slice.Width, slice.Height);
        for (int y = 0; y < slice.Height; y++) for (int x = 0; x < slice.Width; x++) cropped[x, y] = section[x, y];
        var a = HistogramMutualInformation.RobustRange(cropped);
        var b = HistogramMutualInformation.RobustRange(slice);
        var ours = HistogramMutualInformation.Measure(cropped, slice, Transform2D.Identity, 32, a, b);
        Assert.Equal(slice.Pixels.Length, ours.Samples);

        string pa = Path.GetTempFileName(), pb = Path.GetTempFileName();
        try
        {
            File.WriteAllBytes(pa, cropped.Pixels.SelectMany(BitConverter.GetBytes).ToArray());
            File.WriteAllBytes(pb, slice.Pixels.SelectMany(BitConverter.GetBytes).ToArray());
            string F(double v) => v.ToString("R", CultureInfo.InvariantCulture);
            var json = JsonDocument.Parse(NiftiPython.Run("scipy_template.py", "mi", pa, pb, slice.Pixels.Length.ToString(CultureInfo.InvariantCulture),
                "32", F(a.Low), F(a.High), F(b.Low), F(b.High))).RootElement;
            double mi = json.GetProperty("mi").GetDouble(), nmi = json.GetProperty("nmi").GetDouble();
            output.WriteLine($"ours: MI {ours.MutualInformation:R} nats, NMI {ours.Normalised:R}; numpy.histogram2d: MI {mi:R}, NMI {nmi:R}");
            // Same bins and the same weights; the only difference is that we hold the slice's scaled grey level u as
            // float32 (relative rounding ≈ 6e-8 of u ≤ 31), which moves a weight by ≤ 2e-6 per pixel and the entropies
            // by far less on average: 1e-6 nats is ample and still catches any binning or log-base mistake.
            Assert.Equal(mi, ours.MutualInformation, 1e-6);
            Assert.Equal(nmi, ours.Normalised, 1e-6);
            Assert.True(mi > 0.3, "the inverted section still shares much information with its slice");
        }
        finally
        {
            File.Delete(pa);
            File.Delete(pb);
        }
    }

    public static TheoryData<double, double, double, double, bool, string> Moves => new()
    {
        { 60, 23, 12, -9, false, "inverted" },
        { 85, -141, -17, 6, false, "inverted" },
        { 100, 77, 8, 15, true, "inverted" },
        { 72, -35, -5, -11, true, "non-monotone" },
        { 95, 170, 14, 3, false, "non-monotone" },
    };

    [Theory]
    [MemberData(nameof(Moves))]
    public void KnownMoveIsRecoveredDespiteNewContrast(double k, double degrees, double dx, double dy, bool mirrored, string contrast)
    {
        Func<float, float> map = contrast == "inverted"
            ? v => 0.9f - 0.7f * MathF.Pow(v, 0.7f)                       // dark tissue on bright glass, gamma changed
            : v => 0.2f + 0.6f * MathF.Sin(MathF.PI * MathF.Min(v, 1f)); // grey matter bright, background and white matter dark
        var template = Template.Value;
        double cx = (template.Width - 1) / 2.0, cy = (template.Height - 1) / 2.0;
        var move = (mirrored ? Transform2D.MirrorX(cx) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, cx, cy))
            .Then(Transform2D.Translation(dx + 128 - cx, dy + 128 - cy));
        var (slice, section) = Case(k, move, map, 0.04, seed: (int)k);
        var truth = move.Inverse();

        var watch = Stopwatch.StartNew();
        var global = TemplateRegistration.Register(section, slice, null, new TemplateRegistrationOptions());
        double globalMs = watch.Elapsed.TotalMilliseconds;
        var (px, deg) = Error(global.SectionToSlice, truth, 128 + dx, 128 + dy);

        // From a start 6 px and 5° off (as a drifted chain would give).
        var start = truth.Then(Transform2D.Rotation(5, cx, cy)).Then(Transform2D.Translation(4, -4.5));
        watch.Restart();
        var local = TemplateRegistration.Register(section, slice, start, new TemplateRegistrationOptions());
        double localMs = watch.Elapsed.TotalMilliseconds;
        watch.Restart();
        TemplateRegistration.Register(section, slice, start, new TemplateRegistrationOptions());
        double warmMs = watch.Elapsed.TotalMilliseconds;
        var (lpx, ldeg) = Error(local.SectionToSlice, truth, 128 + dx, 128 + dy);
        output.WriteLine($"plane {k}, {contrast}, {degrees}°, mirrored {mirrored}: global {px:0.###} px {deg:0.###}° (similarity {global.Similarity:0.###}, " +
                         $"runner-up {global.RunnerUpSimilarity:0.###}, confidence {global.Confidence:0.##}, {global.Evaluations} evaluations, {globalMs:0} ms); " +
                         $"local {lpx:0.###} px {ldeg:0.###}° (confidence {local.Confidence:0.##}, {local.Evaluations} evaluations, {localMs:0} ms, again {warmMs:0} ms)");
        Assert.Equal(mirrored, global.Mirrored);
        // Targets of the task: within 0.5 px and 0.5°.
        Assert.True(px <= 0.5 && deg <= 0.5, $"global: {px} px, {deg}°");
        Assert.True(lpx <= 0.5 && ldeg <= 0.5, $"local: {lpx} px, {ldeg}°");
        Assert.True(global.Confidence > 0.3, $"confidence {global.Confidence}");
    }

    [Fact]
    public void ASectionOfSomethingElseHasLowConfidence()
    {
        var slice = Template.Value.Slice(80, 1.0, out _);
        var random = new Random(5);
        var noise = new GrayImage(256, 256);
        for (int i = 0; i < noise.Pixels.Length; i++) noise.Pixels[i] = (float)random.NextDouble();
        var match = TemplateRegistration.Register(noise, slice, null, new TemplateRegistrationOptions());
        var (_, real) = Case(80, Transform2D.Translation(128 - 90, 128 - 108), v => 1 - v, 0.04, seed: 9);
        var good = TemplateRegistration.Register(real, slice, null, new TemplateRegistrationOptions());
        output.WriteLine($"noise: similarity {match.Similarity:0.####}, confidence {match.Confidence:0.###}; real section: similarity {good.Similarity:0.####}, confidence {good.Confidence:0.###}");
        Assert.True(match.Similarity < 0.25 * good.Similarity, $"noise similarity {match.Similarity} vs {good.Similarity}");
        Assert.True(match.Confidence < good.Confidence);
    }
}
