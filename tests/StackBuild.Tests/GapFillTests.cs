using StackBuild.Demo;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Render;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Gap filling measured on truth: planes removed on purpose from a real MRI volume (the Colin27 "ch2" template of the
/// Debian package mricron-data, 1 mm axial planes) and from the demo phantom's truth volume, rebuilt from the two
/// planes that bracket the gap, and compared with the removed planes.
/// NRMSE (this project's definition): RMS of (filled − true) over the tissue mask, divided by (p99 − p1) of the true
/// plane over that mask. Tissue mask: voxels where the true plane or one of the two bracketing planes exceeds 5 % of
/// the volume's p99.9 (so the background around the head, which every method fills with zeros, does not dilute it).
/// </summary>
public sealed class GapFillTests(ITestOutputHelper output)
{
    internal sealed record GapCase(int Below, int Above, int Missing);

    /// <summary>Single planes and runs of 2 and 3 removed from axial planes 50..130 of the template (brain).</summary>
    internal static List<GapCase> MriCases(int run)
    {
        var cases = new List<GapCase>();
        for (int start = 52; start + run <= 130; start += 12)
            for (int m = 0; m < run; m++) cases.Add(new GapCase(start - 1, start + run, start + m));
        return cases;
    }

    internal static (double Linear, double Flow) MeanNrmse(Volume v, List<GapCase> cases, GapFiller.FlowOptions options)
    {
        float level = 0.05f * Percentile(v.Voxels, 0.999);
        double linear = 0, flow = 0;
        foreach (var c in cases)
        {
            double t = (double)(c.Missing - c.Below) / (c.Above - c.Below);
            var below = v.Plane(c.Below).ToArray();
            var above = v.Plane(c.Above).ToArray();
            var real = v.Plane(c.Missing).ToArray();
            var mask = real.Select((r, i) => r > level || below[i] > level || above[i] > level).ToArray();
            linear += Nrmse(GapFiller.Interpolate(below, above, v.Nx, v.Ny, t, GapFill.Linear, options), real, mask);
            flow += Nrmse(GapFiller.Interpolate(below, above, v.Nx, v.Ny, t, GapFill.Flow, options), real, mask);
        }
        return (linear / cases.Count, flow / cases.Count);
    }

    internal static double Nrmse(float[] estimate, float[] real, bool[] mask)
    {
        var inside = real.Where((_, i) => mask[i]).ToArray();
        if (inside.Length == 0) return 0;
        double range = Percentile(inside, 0.99) - Percentile(inside, 0.01);
        double sum = 0;
        for (int i = 0; i < real.Length; i++) if (mask[i]) sum += (estimate[i] - real[i]) * (estimate[i] - real[i]);
        return Math.Sqrt(sum / inside.Length) / Math.Max(range, 1e-9);
    }

    private static float Percentile(float[] values, double q)
    {
        var sorted = (float[])values.Clone();
        Array.Sort(sorted);
        return sorted[(int)(q * (sorted.Length - 1))];
    }

    private static Volume DemoTruth() =>
        NiftiFile.Read(Path.Combine(RepositoryPaths.DemoSeries, DemoSpecimenMaker.TruthVolumeFileName)).ToVolume();

    [Fact]
    public void Explore()
    {
        if (Environment.GetEnvironmentVariable("GAPFILL_EXPLORE") != "1") return;
        var mri = RegisterMriTests.Template();
        var demo = DemoTruth();
        output.WriteLine($"mri {mri.Nx}x{mri.Ny}x{mri.Nz}, demo {demo.Nx}x{demo.Ny}x{demo.Nz}");
        var demoCases = new List<GapCase>();
        for (int k = 3; k + 1 < demo.Nz; k += 7) demoCases.Add(new GapCase(k - 1, k + 1, k));
        var sets = new (string Name, GapFiller.FlowOptions O)[]
        {
            ("default", new()),
            ("quad", new() { RobustEpsilon = 0, MedianSide = 0, PreSmoothSigma = 0 }),
            ("a0.25", new() { Alpha = 0.25 }),
            ("a1", new() { Alpha = 1 }),
            ("a2", new() { Alpha = 2 }),
            ("eps0.02", new() { RobustEpsilon = 0.02 }),
            ("eps0.2", new() { RobustEpsilon = 0.2 }),
            ("nomed", new() { MedianSide = 0 }),
            ("nosmooth", new() { PreSmoothSigma = 0 }),
            ("warps4", new() { WarpsPerLevel = 4 }),
        };
        foreach (var (name, o) in sets)
        {
            var sw = System.Diagnostics.Stopwatch.StartNew();
            var s1 = MeanNrmse(mri, MriCases(1), o);
            var s2 = MeanNrmse(mri, MriCases(2), o);
            var s3 = MeanNrmse(mri, MriCases(3), o);
            var d = MeanNrmse(demo, demoCases, o);
            output.WriteLine($"{name,-10} mri1 {s1.Linear:0.0000}/{s1.Flow:0.0000} ({100 * (1 - s1.Flow / s1.Linear):0.0}%)  mri2 {s2.Linear:0.0000}/{s2.Flow:0.0000} ({100 * (1 - s2.Flow / s2.Linear):0.0}%)  mri3 {s3.Linear:0.0000}/{s3.Flow:0.0000} ({100 * (1 - s3.Flow / s3.Linear):0.0}%)  demo {d.Linear:0.0000}/{d.Flow:0.0000} ({100 * (1 - d.Flow / d.Linear):0.0}%)  {sw.ElapsedMilliseconds} ms");
        }
    }
}
