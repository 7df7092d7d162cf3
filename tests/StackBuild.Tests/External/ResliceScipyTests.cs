using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Reslice;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The reslicer against an outside reference: SciPy's <c>ndimage.map_coordinates</c> (Debian python3-scipy),
/// driven by tests/tools/scipy_reslice.py, which places the plane's pixels from the world-space plane definition
/// and <c>numpy.linalg.inv</c> of the affine on its own.
/// </summary>
public class ResliceScipyTests
{
    [Fact]
    public void ObliqueTrilinearPlaneMatchesScipyMapCoordinates()
    {
        var volume = SmoothRandomVolume(37, 29, 23, seed: 7);
        var spec = new PlaneSpec(PlaneOrientation.Parse("jk"), 23.5, -31.2, OffsetMm: 1.7, PixelSizeMm: 0.25);
        var plane = spec.Build(volume);
        var ours = Reslicer.Reslice(volume, plane, new ResliceOptions(Fill: -5f));
        var (reference, percentiles) = RunScipy(volume, plane, fill: -5f, nearest: false);

        float min = volume.Voxels.Min(), max = volume.Voxels.Max();
        double worst = 0;
        for (int p = 0; p < reference.Length; p++) worst = Math.Max(worst, Math.Abs(reference[p] - ours.Pixels[p]));
        // The task's tolerance: 1e-3 of the intensity range.
        Assert.True(worst <= 1e-3 * (max - min), $"largest difference from SciPy {worst:G4}, range {max - min:G4}");
        // The plane must really cut the volume and leave some pixels outside, or the check proves little.
        Assert.InRange(percentiles.GetProperty("inside").GetInt32(), reference.Length / 4, reference.Length - 1);
    }

    [Fact]
    public void ObliqueNearestPlaneOfLabelsMatchesScipy()
    {
        var volume = SmoothRandomVolume(31, 26, 19, seed: 11);
        for (int i = 0; i < volume.Voxels.Length; i++) volume.Voxels[i] = MathF.Floor(volume.Voxels[i] * 3); // a few labels
        var spec = new PlaneSpec(PlaneOrientation.Section, -17, 41, OffsetMm: -0.6, PixelSizeMm: 0.2);
        var plane = spec.Build(volume);
        var ours = Reslicer.Reslice(ResliceSource.Compact(volume), plane, new ResliceOptions(ResliceSampling.Nearest, Fill: 99f));
        var (reference, _) = RunScipy(volume, plane, fill: 99f, nearest: true);
        int differing = 0;
        for (int p = 0; p < reference.Length; p++) if (reference[p] != ours.Pixels[p]) differing++;
        Assert.Equal(0, differing);
    }

    [Fact]
    public void RobustWindowMatchesNumpyPercentiles()
    {
        var volume = SmoothRandomVolume(40, 30, 20, seed: 3);
        var plane = new PlaneSpec(PlaneOrientation.Section).Build(volume);
        var (_, result) = RunScipy(volume, plane, fill: 0f, nearest: false);
        var window = IntensityWindow.Robust(volume);
        double tolerance = 1e-6 * (volume.Voxels.Max() - volume.Voxels.Min());
        // Exact by design (the ranks are sorted within their bins); allow only float rounding.
        Assert.InRange(window.Low, result.GetProperty("low").GetDouble() - tolerance, result.GetProperty("low").GetDouble() + tolerance);
        Assert.InRange(window.High, result.GetProperty("high").GetDouble() - tolerance, result.GetProperty("high").GetDouble() + tolerance);
    }

    /// <summary>
    /// A sum of a few random low-frequency cosines over an oblique, anisotropic grid (rotated about two axes,
    /// voxels 0.3 × 0.4 × 0.9 mm, shifted): smooth, so trilinear interpolation is well posed, and not aligned with
    /// the world axes, so the affine's inverse is exercised.
    /// </summary>
    internal static Volume SmoothRandomVolume(int nx, int ny, int nz, int seed)
    {
        var random = new Random(seed);
        double a = 0.4, b = -0.25;
        double[,] rotation =
        {
            { Math.Cos(a), -Math.Sin(a) * Math.Cos(b), Math.Sin(a) * Math.Sin(b) },
            { Math.Sin(a), Math.Cos(a) * Math.Cos(b), -Math.Cos(a) * Math.Sin(b) },
            { 0, Math.Sin(b), Math.Cos(b) },
        };
        double[] sizes = [0.3, 0.4, 0.9], shift = [-3.2, 5.1, 1.3];
        var rows = new double[3][];
        for (int r = 0; r < 3; r++) rows[r] = [rotation[r, 0] * sizes[0], rotation[r, 1] * sizes[1], rotation[r, 2] * sizes[2], shift[r]];
        var volume = new Volume(nx, ny, nz, Affine.FromRows(rows[0], rows[1], rows[2]));
        var waves = Enumerable.Range(0, 6).Select(_ => (
            Fi: random.NextDouble() * 0.5, Fj: random.NextDouble() * 0.5, Fk: random.NextDouble() * 0.6,
            Phase: random.NextDouble() * 6.28, Amplitude: 10 + 40 * random.NextDouble())).ToArray();
        for (int k = 0; k < nz; k++)
        for (int j = 0; j < ny; j++)
        for (int i = 0; i < nx; i++)
            volume[i, j, k] = (float)(100 + waves.Sum(w => w.Amplitude * Math.Cos(w.Fi * i + w.Fj * j + w.Fk * k + w.Phase)));
        return volume;
    }

    internal static (float[] Plane, JsonElement Result) RunScipy(Volume volume, ReslicePlane plane, float fill, bool nearest)
    {
        var folder = Directory.CreateTempSubdirectory("stackbuild-reslice-scipy-").FullName;
        try
        {
            var rawPath = Path.Combine(folder, "volume.f32");
            using (var f = File.Create(rawPath))
                f.Write(System.Runtime.InteropServices.MemoryMarshal.AsBytes(volume.Voxels.AsSpan()));
            var outPath = Path.Combine(folder, "plane.f32");
            var request = new
            {
                volume = rawPath, output = outPath, dims = new[] { volume.Nx, volume.Ny, volume.Nz },
                affine = volume.Affine.ToRows(), centre = plane.Centre.ToArray(), right = plane.Right.ToArray(),
                down = plane.Down.ToArray(), width = plane.Width, height = plane.Height, pixel = plane.PixelSizeMm,
                fill, nearest,
            };
            var requestPath = Path.Combine(folder, "request.json");
            File.WriteAllText(requestPath, JsonSerializer.Serialize(request));
            var stdout = PythonTool.Run("scipy_reslice.py", requestPath);
            var bytes = File.ReadAllBytes(outPath);
            Assert.Equal(plane.Width * plane.Height * 4, bytes.Length);
            var values = System.Runtime.InteropServices.MemoryMarshal.Cast<byte, float>(bytes).ToArray();
            return (values, JsonDocument.Parse(stdout).RootElement.Clone());
        }
        finally
        {
            Directory.Delete(folder, recursive: true);
        }
    }
}

/// <summary>Runs a script from tests/tools with Debian's /usr/bin/python3; fails clearly when it or SciPy is missing.</summary>
internal static class PythonTool
{
    public static string Run(string script, params string[] args)
    {
        Assert.True(File.Exists(NiftiPython.Python),
            $"{NiftiPython.Python} is missing: install the Debian packages python3 and python3-scipy (apt-get install -y python3-scipy)");
        var path = NiftiPython.Tool(script);
        Assert.True(File.Exists(path), $"{path} is missing: tests/tools should be copied to the test output folder");
        var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, [path, .. args]);
        if (stderr.Contains("No module named 'scipy'") || stderr.Contains("No module named 'numpy'"))
            Assert.Fail("SciPy is missing for /usr/bin/python3: install the Debian package python3-scipy (apt-get install -y python3-scipy)");
        Assert.True(exit == 0, $"{script} failed ({exit}): {stderr}");
        return stdout;
    }

    /// <summary>Runs a script that reads OME-Zarr with python3-zarr (exit code 3: a package is missing, named in its message).</summary>
    public static string RunZarr(string script, params string[] args)
    {
        var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, [NiftiPython.Tool(script), .. args]);
        if (exit == 3) Assert.Fail($"{script}: {stderr.Trim()} (tests/run.sh installs python3-zarr and python3-nibabel as root)");
        Assert.True(exit == 0, $"{script} failed ({exit}): {stderr}");
        return stdout;
    }

    /// <summary>Runs a line of Python with python3-zarr (to change a test image as another Zarr writer would).</summary>
    public static void RunZarrCode(string code)
    {
        var (exit, _, stderr) = NiftiPython.Process(NiftiPython.Python, ["-c", code]);
        Assert.True(exit == 0, $"python3 -c failed ({exit}): {stderr} (Debian package python3-zarr)");
    }
}
