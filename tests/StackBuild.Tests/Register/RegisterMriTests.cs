using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Axial sections of a real MRI volume (the Colin27 "ch2" template from the Debian package mricron-data), each
/// moved by a random rigid map (any angle, some mirrored) in the test, registered back. Truth is the map the
/// test applied. Each section carries a one-sided marking track (a bright stripe beside its right edge), as
/// histologists ink or notch one side of a block so mirrored mounting can be told (common practice).
/// </summary>
public class RegisterMriTests(ITestOutputHelper output)
{
    internal const string TemplatePath = "/usr/share/mricron/templates/ch2.nii.gz";
    private const int Canvas = 300;

    internal sealed record PairCase(int Section, GrayImage Fixed, GrayImage Moving, Transform2D Truth, bool Mirrored, (double X, double Y) MovedCentre);

    internal sealed record PairOutcome(PairCase Case, PairResult Result, double AngleError, double CentreError)
    {
        public bool MirrorRight => Result.Best.Mirrored == Case.Mirrored;
        /// <summary>"Wildly wrong": wrong mirror, more than 2° or more than 2 px off.</summary>
        public bool Wild => !MirrorRight || AngleError > 2 || CentreError > 2;
    }

    private static Volume? _volume;

    internal static Volume Template()
    {
        if (_volume != null) return _volume;
        if (!File.Exists(TemplatePath))
            Assert.Fail($"{TemplatePath} is missing: install the Debian package mricron-data (tests/run.sh does this as root)");
        return _volume = NiftiFile.Read(TemplatePath).ToVolume();
    }

    /// <summary>Axial plane k (the volume is RAS, so k runs inferior to superior) on a 300×300 canvas, scaled to [0, 1], with the marking track.</summary>
    internal static GrayImage Section(Volume v, int k, bool marker = true)
    {
        Assert.Equal("RAS", v.Affine.AxisCodes.Code);
        float max = v.Voxels.Max();
        var img = new GrayImage(Canvas, Canvas);
        int ox = (Canvas - v.Nx) / 2, oy = (Canvas - v.Ny) / 2;
        int xMax = -1, yMin = int.MaxValue, yMax = -1;
        for (int j = 0; j < v.Ny; j++)
        for (int i = 0; i < v.Nx; i++)
        {
            float value = v[i, j, k] / max;
            img[i + ox, j + oy] = value;
            if (value > 0.1f) { xMax = Math.Max(xMax, i + ox); yMin = Math.Min(yMin, j + oy); yMax = Math.Max(yMax, j + oy); }
        }
        if (xMax < 0 || !marker) return img;
        int top = yMin, bottom = yMin + (int)(0.4 * (yMax - yMin));
        for (int y = top; y <= bottom; y++) for (int x = xMax + 4; x <= Math.Min(Canvas - 1, xMax + 8); x++) img[x, y] = 0.9f;
        return img;
    }

    /// <summary>Deterministic pairs: sections spread over the brain, each moved by a random rigid map about the canvas centre.</summary>
    internal static List<PairCase> Cases(int sections, int perSection, int seed, bool marker = true)
    {
        var v = Template();
        var rng = new Random(seed);
        var cases = new List<PairCase>();
        double c = (Canvas - 1) / 2.0;
        for (int s = 0; s < sections; s++)
        {
            int k = 45 + (int)Math.Round(s * 90.0 / Math.Max(1, sections - 1)); // axial planes 45..135 hold brain
            var section = Section(v, k, marker);
            for (int p = 0; p < perSection; p++)
            {
                double degrees = rng.NextDouble() * 360 - 180, dx = rng.NextDouble() * 30 - 15, dy = rng.NextDouble() * 30 - 15;
                bool mirrored = rng.NextDouble() < 0.35;
                var move = (mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, c, c)).Then(Transform2D.Translation(dx, dy));
                cases.Add(new PairCase(k, section, RegisterTestImages.Move(section, move, Canvas, Canvas), move.Inverse(), mirrored, move.Apply(c, c)));
            }
        }
        return cases;
    }

    internal static List<PairOutcome> Run(IReadOnlyList<PairCase> cases, RegistrationOptions options)
    {
        var outcomes = new PairOutcome[cases.Count];
        Parallel.For(0, cases.Count, new ParallelOptions { MaxDegreeOfParallelism = 2 }, i =>
        {
            var pc = cases[i];
            var result = SectionRegistration.Register(SectionRegistration.Prepare(pc.Fixed, options), SectionRegistration.Prepare(pc.Moving, options), options);
            double angleError = RegisterTestImages.AngleError(result.Best.MovingToFixed.RotationDegrees, pc.Truth.RotationDegrees);
            double centreError = RegisterTestImages.PointError(result.Best.MovingToFixed, pc.Truth, pc.MovedCentre.X, pc.MovedCentre.Y);
            outcomes[i] = new PairOutcome(pc, result, angleError, centreError);
        });
        return outcomes.ToList();
    }

    internal static string Summary(IReadOnlyList<PairOutcome> o) =>
        $"{o.Count} pairs: median translation error {RegisterTestImages.Median(o.Select(x => x.CentreError)):F4} px " +
        $"(max {o.Max(x => x.CentreError):F3}), median rotation error {RegisterTestImages.Median(o.Select(x => x.AngleError)):F4}° " +
        $"(max {o.Max(x => x.AngleError):F3}), mirror right {o.Count(x => x.MirrorRight)}/{o.Count}, wild {o.Count(x => x.Wild)} " +
        $"(max confidence of wild {o.Where(x => x.Wild).Select(x => x.Result.Confidence).DefaultIfEmpty(0).Max():F3}), " +
        $"min confidence of good {o.Where(x => !x.Wild).Select(x => x.Result.Confidence).DefaultIfEmpty(1).Min():F3}";

    internal static void AssertTargets(IReadOnlyList<PairOutcome> outcomes)
    {
        // Targets of the task: median translation ≤ 0.1 px, median rotation ≤ 0.1°, mirror right ≥ 99 %,
        // and every wildly wrong result flagged by a low confidence.
        Assert.True(RegisterTestImages.Median(outcomes.Select(o => o.CentreError)) <= 0.1, Summary(outcomes));
        Assert.True(RegisterTestImages.Median(outcomes.Select(o => o.AngleError)) <= 0.1, Summary(outcomes));
        Assert.True(outcomes.Count(o => o.MirrorRight) >= 0.99 * outcomes.Count, Summary(outcomes));
        foreach (var o in outcomes.Where(o => o.Wild))
            Assert.True(o.Result.Confidence < 0.3, $"section {o.Case.Section}: wrong result with confidence {o.Result.Confidence:F3}; {Summary(outcomes)}");
    }

    [Fact]
    public void MovedSectionsAreRegisteredBack()
    {
        var outcomes = Run(Cases(sections: 24, perSection: 1, seed: 2026), new RegistrationOptions());
        output.WriteLine(Summary(outcomes));
        foreach (var o in outcomes)
            output.WriteLine($"k={o.Case.Section} mirror {o.Case.Mirrored}/{o.Result.Best.Mirrored} angle err {o.AngleError:F4} centre err {o.CentreError:F4} " +
                             $"NCC {o.Result.Best.Ncc:F4} runner-up {o.Result.RunnerUp?.Ncc:F4} conf {o.Result.Confidence:F3}");
        AssertTargets(outcomes);
    }

    [Fact]
    public void WithoutTheMarkerAMirrorMistakeWouldCarryLowConfidence()
    {
        // Without the track a brain section is nearly symmetric: the mirror call may be hard, but whatever is
        // wrong must be flagged. The runner-up must be the other mirror and score clearly lower when right.
        var outcomes = Run(Cases(sections: 12, perSection: 1, seed: 99, marker: false), new RegistrationOptions());
        output.WriteLine(Summary(outcomes));
        foreach (var o in outcomes)
        {
            Assert.True(!o.Wild || o.Result.Confidence < 0.3, $"section {o.Case.Section}: wrong with confidence {o.Result.Confidence:F3}");
            Assert.NotNull(o.Result.RunnerUp);
            Assert.True(o.Result.RunnerUp!.Ncc <= o.Result.Best.Ncc);
        }
        Assert.True(RegisterTestImages.Median(outcomes.Select(o => o.CentreError)) <= 0.1, Summary(outcomes));
    }

    [SoakFact]
    public void SoakManyMovedSections()
    {
        var outcomes = Run(Cases(sections: 91, perSection: 4, seed: 7), new RegistrationOptions());
        output.WriteLine(Summary(outcomes));
        AssertTargets(outcomes);
    }
}
