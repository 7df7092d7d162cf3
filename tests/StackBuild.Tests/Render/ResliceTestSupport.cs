using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;

namespace StackBuild.Tests;

/// <summary>Synthetic test volumes for the reslice and viewer tests (phantoms only; no real data).</summary>
internal static class ResliceTestSupport
{
    /// <summary>
    /// An 8-bit-valued phantom of a section series: an ellipsoid of textured "tissue" with a bright round inclusion
    /// and a dark elongated one, on a faint background; voxels 20 × 20 × 50 µm along R, I, P (sections run
    /// posterior). Deterministic.
    /// </summary>
    public static Volume Phantom(int nx, int ny, int nz)
    {
        var volume = new Volume(nx, ny, nz, Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.05, nx, ny, nz, (1.5, -0.5, 2)));
        var random = new Random(12);
        for (int k = 0; k < nz; k++)
        for (int j = 0; j < ny; j++)
        for (int i = 0; i < nx; i++)
        {
            double x = (i - nx / 2.0) / (nx / 2.0), y = (j - ny / 2.0) / (ny / 2.0), z = (k - nz / 2.0) / (nz / 2.0);
            double v = x * x / 0.8 + y * y / 0.7 + z * z / 0.9 < 1 ? 120 + 60 * Math.Sin(8 * x + 3 * z) * Math.Cos(6 * y) : 12;
            if ((x - 0.2) * (x - 0.2) + (y + 0.1) * (y + 0.1) + 0.36 * z * z < 0.05) v = 230;
            if ((x + 0.35) * (x + 0.35) / 0.02 + (y - 0.2) * (y - 0.2) / 0.08 + (z + 0.2) * (z + 0.2) / 0.3 < 1) v = 40;
            volume[i, j, k] = (float)Math.Clamp(Math.Round(v + random.Next(-6, 7)), 0, 255);
        }
        return volume;
    }

    /// <summary>Writes <paramref name="volume"/> as a float32 NIfTI-1 file (values exact) and returns its path.</summary>
    public static string WriteNifti(Volume volume, string folder, string name = "phantom.nii.gz")
    {
        var path = Path.Combine(folder, name);
        NiftiFile.Write(path, volume);
        return path;
    }

    /// <summary>Runs the command line in-process and returns its exit code and both outputs.</summary>
    public static (int Exit, string Out, string Err) Cli(params string[] args)
    {
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int exit = StackBuild.Cli.Program.Run(args, stdout, stderr);
        return (exit, stdout.ToString(), stderr.ToString());
    }
}
