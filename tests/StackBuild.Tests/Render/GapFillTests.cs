using StackBuild.Demo;
using StackBuild.Imaging;
using StackBuild.IO;
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
        var linear = new double[cases.Count];
        var flow = new double[cases.Count];
        Parallel.For(0, cases.Count, n =>
        {
            var c = cases[n];
            double t = (double)(c.Missing - c.Below) / (c.Above - c.Below);
            var below = v.Plane(c.Below).ToArray();
            var above = v.Plane(c.Above).ToArray();
            var real = v.Plane(c.Missing).ToArray();
            var mask = real.Select((r, i) => r > level || below[i] > level || above[i] > level).ToArray();
            linear[n] = Nrmse(GapFiller.Interpolate(below, above, v.Nx, v.Ny, t, GapFill.Linear, options), real, mask);
            flow[n] = Nrmse(GapFiller.Interpolate(below, above, v.Nx, v.Ny, t, GapFill.Flow, options), real, mask);
        });
        return (linear.Average(), flow.Average());
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

    private static string Describe((double Linear, double Flow) r) =>
        $"linear {r.Linear:0.0000}, flow {r.Flow:0.0000} ({100 * (1 - r.Flow / r.Linear):0.0} % lower)";

    [Fact]
    public void FlowFillBeatsLinearOnMriPlanesRemovedOnPurpose()
    {
        // Target of the issue: flow ≥ 20 % lower NRMSE than linear blending. Measured (2026-12-02, this machine; local
        // normalisation σ 8 px before the flow, cubic-convolution warping, residual confidence): single planes
        // 0.0231 → 0.0183 (20.9 % lower), runs of 2 0.0361 → 0.0265 (26.5 %), runs of 3 0.0482 → 0.0348 (27.9 %).
        // Before those changes (bilinear warping, no normalisation): 8.0 / 19.9 / 23.1 %. Bounds below are this
        // project's, a little under the measurements (ratios 0.80, 0.75, 0.73 against measured 0.791, 0.735, 0.721).
        var mri = RegisterMriTests.Template();
        var single = MeanNrmse(mri, MriCases(1), new GapFiller.FlowOptions());
        var two = MeanNrmse(mri, MriCases(2), new GapFiller.FlowOptions());
        var three = MeanNrmse(mri, MriCases(3), new GapFiller.FlowOptions());
        output.WriteLine($"MRI single planes ({MriCases(1).Count}): {Describe(single)}");
        output.WriteLine($"MRI runs of 2 ({MriCases(2).Count} planes): {Describe(two)}");
        output.WriteLine($"MRI runs of 3 ({MriCases(3).Count} planes): {Describe(three)}");
        Assert.True(single.Flow <= 0.80 * single.Linear, Describe(single));
        Assert.True(two.Flow <= 0.75 * two.Linear, Describe(two));
        Assert.True(three.Flow <= 0.73 * three.Linear, Describe(three));
    }

    [Fact]
    public void FlowFillBeatsLinearOnDemoTruthPlanes()
    {
        // The demo phantom's truth volume (before any mounting or registration): every 7th plane from 3 on removed.
        // Measured (2026-12-02, local normalisation + cubic-convolution warping): linear 0.0982, flow 0.0912 (7.1 % lower;
        // 9.2 % with the earlier bilinear warping, which smoothed the phantom's fine texture). The 20 % target is NOT met
        // here: neighbouring demo planes differ mostly by texture, not by displacement. Bound: this project's, under that
        // measurement.
        var demo = DemoTruth();
        var cases = new List<GapCase>();
        for (int k = 3; k + 1 < demo.Nz; k += 7) cases.Add(new GapCase(k - 1, k + 1, k));
        var r = MeanNrmse(demo, cases, new GapFiller.FlowOptions());
        output.WriteLine($"demo truth, {cases.Count} single planes: {Describe(r)}");
        Assert.True(r.Flow <= 0.95 * r.Linear, Describe(r)); // measured ratio 0.929
    }

    [Fact]
    public void FlatAndEmptyPlanesGiveFiniteFills()
    {
        const int w = 33, h = 20;
        var zeros = new float[w * h];
        var flat = Enumerable.Repeat(7f, w * h).ToArray();
        var ramp = Enumerable.Range(0, w * h).Select(i => (float)(i % w)).ToArray();
        foreach (var (below, above) in new[] { (zeros, zeros), (flat, flat), (zeros, flat), (flat, ramp) })
        foreach (var method in new[] { GapFill.None, GapFill.Linear, GapFill.Flow })
        foreach (double t in new[] { 0, 0.3, 0.5, 1, double.NaN, -2 })
        {
            var plane = GapFiller.Interpolate(below, above, w, h, t, method);
            Assert.All(plane, v => Assert.True(float.IsFinite(v)));
        }
        // Analytic: between two equal flat planes every method gives the same flat plane; between zeros and 7 at
        // t = 0.5 the flow cannot move anything, so it equals the linear blend 3.5.
        Assert.All(GapFiller.Interpolate(flat, flat, w, h, 0.4, GapFill.Flow), v => Assert.Equal(7f, v, 1e-4f));
        Assert.All(GapFiller.Interpolate(zeros, flat, w, h, 0.5, GapFill.Flow), v => Assert.Equal(3.5f, v, 1e-4f));
        Assert.Throws<ArgumentException>(() => GapFiller.Interpolate(zeros, flat.AsSpan(1), w, h, 0.5, GapFill.Flow));
    }

    [Fact]
    public void SymmetricFlowFindsAKnownShiftAtEveryFraction()
    {
        // Analytic truth: b is a shifted by (3, −2) px, so the field on the grid of any intermediate plane is (3, −2).
        const int w = 96, h = 80;
        var (a, b) = SmoothingSolverTests.ShiftedPatterns(w, h, 3, -2);
        foreach (double t in new[] { 0.25, 0.5, 0.75 })
        {
            var (u, v) = GapFiller.SymmetricFlow(a, b, t, new GapFiller.FlowOptions());
            double su = 0, sv = 0;
            int m = 0;
            for (int y = 20; y < h - 20; y++)
            for (int x = 20; x < w - 20; x++) { su += u[y * w + x]; sv += v[y * w + x]; m++; }
            var fill = GapFiller.Interpolate(a.Pixels, b.Pixels, w, h, t, GapFill.Flow);
            double err = 0;
            for (int y = 20; y < h - 20; y++)
            for (int x = 20; x < w - 20; x++) err += Math.Pow(fill[y * w + x] - SmoothingSolverTests.Pattern(x - 3 * t, y + 2 * t), 2);
            output.WriteLine($"t = {t}: mean field in the middle ({su / m:0.###}, {sv / m:0.###}); fill rms {Math.Sqrt(err / m):0.####}");
            // The smoothness term pulls the field towards zero where the pattern varies slowly (the vertical cosine):
            // measured (2026-12-02) up to 0.24 px short of 2 px (0.29 px before the local normalisation); 0.35 px is this
            // project's bound.
            Assert.Equal(3, su / m, 0.35);
            Assert.Equal(-2, sv / m, 0.35);
            // The filled plane is the pattern moved t of the way.
            Assert.True(Math.Sqrt(err / m) < 0.03, $"t = {t}: rms {Math.Sqrt(err / m)}");
        }
    }
}

/// <summary><see cref="ZResampler.ResampleZ"/>: identity, geometry through the affine, and SciPy's linear interpolation along z.</summary>
public sealed class ZResamplerTests(ITestOutputHelper output)
{
    /// <summary>A small oblique phantom volume, 0.7 mm between planes, whose planes hold a blob that moves from plane to plane.</summary>
    private static Volume Phantom(int nz = 7)
    {
        var affine = NiftiPhantom.Oblique("RAS", 0.5, 0.5, 0.7, 10, 5, (1, 2, 3));
        return NiftiPhantom.Make(40, 30, nz, affine, (i, j, k) =>
            (float)(100 * Math.Exp(-(Math.Pow(i - 12 - 2.0 * k, 2) + Math.Pow(j - 15, 2)) / 30.0) + 5 * Math.Sin(0.3 * i + 0.2 * j + k)));
    }

    [Fact]
    public void TheSameSpacingReturnsTheSameVoxels()
    {
        var v = Phantom();
        foreach (var method in new[] { GapFill.None, GapFill.Linear, GapFill.Flow })
        {
            var r = ZResampler.ResampleZ(v, v.Affine.VoxelSizes.K, method);
            Assert.Equal(v.Nz, r.Nz);
            Assert.Equal(v.Voxels, r.Voxels);
            for (int row = 0; row < 4; row++) for (int col = 0; col < 4; col++) Assert.Equal(v.Affine[row, col], r.Affine[row, col], 12);
        }
    }

    [Fact]
    public void HalfTheSpacingPutsPlanesHalfWayAndFillsThemByTheInterpolation()
    {
        var v = Phantom();
        double s = v.Affine.VoxelSizes.K;
        foreach (var method in new[] { GapFill.Linear, GapFill.Flow })
        {
            var r = ZResampler.ResampleZ(v, s / 2, method);
            Assert.Equal(2 * v.Nz - 1, r.Nz);
            Assert.Equal(s / 2, r.Affine.VoxelSizes.K, 12);
            for (int m = 0; m < r.Nz; m++)
            {
                // World position of new plane m is that of original index m / 2, for any (i, j).
                var expected = v.Affine.Apply(3, 4, m / 2.0);
                var actual = r.Affine.Apply(3, 4, m);
                Assert.Equal(expected.X, actual.X, 9);
                Assert.Equal(expected.Y, actual.Y, 9);
                Assert.Equal(expected.Z, actual.Z, 9);
                if (m % 2 == 0)
                    Assert.Equal(v.Plane(m / 2).ToArray(), r.Plane(m).ToArray());
                else
                    Assert.Equal(GapFiller.Interpolate(v.Plane(m / 2), v.Plane(m / 2 + 1), v.Nx, v.Ny, 0.5, method), r.Plane(m).ToArray());
            }
        }
    }

    [Fact]
    public void LinearResamplingMatchesScipyMapCoordinatesOrder1()
    {
        // External check: scipy.ndimage.map_coordinates(order=1) along z at original index m · new/old spacing (Debian
        // python3-scipy), plane count ⌊(Nz − 1) · old / new⌋ + 1 computed by the script.
        var v = Phantom(9);
        double spacing = 0.3; // not a divisor of 0.7: fractions vary from plane to plane
        var r = ZResampler.ResampleZ(v, spacing, GapFill.Linear);
        var dir = Directory.CreateTempSubdirectory("stackbuild-zresample-").FullName;
        try
        {
            string input = Path.Combine(dir, "in.f32"), result = Path.Combine(dir, "out.f32");
            File.WriteAllBytes(input, System.Runtime.InteropServices.MemoryMarshal.AsBytes(v.Voxels.AsSpan()).ToArray());
            const string script = """
                import sys, numpy as np
                from scipy.ndimage import map_coordinates
                src, dst, nx, ny, nz, old, new = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]), float(sys.argv[6]), float(sys.argv[7])
                v = np.fromfile(src, dtype='<f4').reshape(nz, ny, nx).astype(np.float64)
                count = int(np.floor((nz - 1) * old / new + 1e-9)) + 1
                z = np.arange(count) * (new / old)
                zz, yy, xx = np.meshgrid(z, np.arange(ny), np.arange(nx), indexing='ij')
                map_coordinates(v, [zz, yy, xx], order=1, mode='nearest').astype('<f4').tofile(dst)
                print(count)
                """;
            var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, ["-c", script, input, result, $"{v.Nx}", $"{v.Ny}", $"{v.Nz}",
                v.Affine.VoxelSizes.K.ToString("R", System.Globalization.CultureInfo.InvariantCulture), spacing.ToString("R", System.Globalization.CultureInfo.InvariantCulture)]);
            Assert.True(exit == 0, $"python3 with scipy failed (Debian python3-scipy): {stderr}");
            Assert.Equal(int.Parse(stdout.Trim()), r.Nz);
            var expected = System.Runtime.InteropServices.MemoryMarshal.Cast<byte, float>(File.ReadAllBytes(result)).ToArray();
            Assert.Equal(expected.Length, r.Voxels.Length);
            double max = expected.Select((e, i) => Math.Abs(e - r.Voxels[i])).Max();
            output.WriteLine($"{r.Nz} planes; largest difference from SciPy {max:g3} (values up to ≈ 105)");
            Assert.True(max < 1e-3, $"largest difference {max}");
        }
        finally { Directory.Delete(dir, recursive: true); }
    }

    [Fact]
    public void BadSpacingsAreRefused()
    {
        var v = Phantom();
        foreach (double spacing in new[] { 0, -0.5, double.NaN, double.PositiveInfinity, 1e-9 })
        {
            var e = Assert.Throws<InputProblemException>(() => ZResampler.ResampleZ(v, spacing, GapFill.Linear));
            Assert.Equal("--voxel-size", e.File);
            output.WriteLine(e.Message);
        }
        // Just at the limit: (Nz − 1) · 0.7 / spacing + 1 = MaxPlanes is allowed.
        double limit = (v.Nz - 1) * v.Affine.VoxelSizes.K / (StackBuild.Pipeline.BuildPipeline.MaxPlanes - 1);
        Assert.Throws<InputProblemException>(() => ZResampler.ResampleZ(v, limit * 0.999, GapFill.None));
    }
}
