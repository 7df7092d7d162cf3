using System.Diagnostics;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>A fresh folder per test class, removed afterwards.</summary>
public sealed class NiftiTempFolder : IDisposable
{
    public string Path { get; } = Directory.CreateTempSubdirectory("stackbuild-nifti-").FullName;

    public string File(string name) => System.IO.Path.Combine(Path, name);

    /// <summary>Names of files left in the folder that look like unfinished atomic writes.</summary>
    public string[] LeftoverTempFiles() =>
        Directory.GetFiles(Path, "*.part", SearchOption.AllDirectories).Concat(Directory.GetFiles(Path, ".*")).ToArray();

    public void Dispose()
    {
        try { Directory.Delete(Path, recursive: true); } catch (IOException) { }
    }
}

/// <summary>Runs the reference scripts under tests/tools with Debian's Python.</summary>
internal static class NiftiPython
{
    public const string Python = "/usr/bin/python3";

    public static string Tool(string name) => System.IO.Path.Combine(AppContext.BaseDirectory, "tools", name);

    /// <summary>Runs a script and returns its standard output; a missing interpreter or package fails the test and names the Debian package.</summary>
    public static string Run(string script, params string[] args)
    {
        if (!File.Exists(Python))
            Assert.Fail($"{Python} is missing: install the Debian packages python3 and python3-nibabel (tests/run.sh does this as root)");
        var (exit, stdout, stderr) = Process(Python, [Tool(script), .. args]);
        if (exit == 3)
            Assert.Fail($"{script}: {stderr.Trim()} (Debian package python3-nibabel; tests/run.sh installs it as root)");
        if (exit != 0)
            Assert.Fail($"{script} failed with exit code {exit}: {stderr.Trim()}");
        return stdout;
    }

    /// <summary>Runs a program to completion (at most 2 minutes) and returns its exit code and output.</summary>
    public static (int Exit, string Out, string Err) Process(string program, IEnumerable<string> args)
    {
        var start = new ProcessStartInfo(program) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (var a in args) start.ArgumentList.Add(a);
        using var process = System.Diagnostics.Process.Start(start)!;
        var stdout = process.StandardOutput.ReadToEndAsync();
        var stderr = process.StandardError.ReadToEndAsync();
        if (!process.WaitForExit(120_000))
        {
            process.Kill(entireProcessTree: true);
            Assert.Fail($"{program} did not finish within 2 minutes");
        }
        return (process.ExitCode, stdout.Result, stderr.Result);
    }

    public static JsonElement[] RunJsonList(string script, params string[] args) =>
        JsonDocument.Parse(Run(script, args)).RootElement.EnumerateArray().ToArray();

    public static double[][] Matrix(JsonElement rows) =>
        rows.EnumerateArray().Select(r => r.EnumerateArray().Select(v => v.GetDouble()).ToArray()).ToArray();
}

/// <summary>Synthetic test volumes (phantoms only).</summary>
internal static class NiftiPhantom
{
    /// <summary>A volume whose every voxel holds a different value from <paramref name="value"/>(i, j, k).</summary>
    public static Volume Make(int nx, int ny, int nz, Affine affine, Func<int, int, int, float> value)
    {
        var v = new Volume(nx, ny, nz, affine);
        for (int k = 0; k < nz; k++) for (int j = 0; j < ny; j++) for (int i = 0; i < nx; i++) v[i, j, k] = value(i, j, k);
        return v;
    }

    /// <summary>A rigid affine with the given axis codes, voxel sizes, then turned by small angles about x and z (so it is oblique).</summary>
    public static Affine Oblique(string axes, double si, double sj, double sk, double degreesX, double degreesZ, (double, double, double) centre)
    {
        var basis = Affine.FromAxes(AxisCodes.Parse(axes), si, sj, sk, 1, 1, 1, centre);
        double a = degreesX * Math.PI / 180, b = degreesZ * Math.PI / 180;
        var rx = Affine.FromRows([1, 0, 0, 0], [0, Math.Cos(a), -Math.Sin(a), 0], [0, Math.Sin(a), Math.Cos(a), 0]);
        var rz = Affine.FromRows([Math.Cos(b), -Math.Sin(b), 0, 0], [Math.Sin(b), Math.Cos(b), 0, 0], [0, 0, 1, 0]);
        return basis.Then(rx).Then(rz);
    }

    public static void AssertAffine(Affine expected, Affine actual, double tolerance)
    {
        for (int r = 0; r < 4; r++)
        for (int c = 0; c < 4; c++)
            Assert.True(Math.Abs(expected[r, c] - actual[r, c]) <= tolerance,
                $"affine[{r},{c}]: expected {expected[r, c]}, got {actual[r, c]} (tolerance {tolerance})");
    }

    public static void AssertAffine(double[][] expectedRows, Affine actual, double tolerance, double scale = 1)
    {
        for (int r = 0; r < 4; r++)
        for (int c = 0; c < 4; c++)
        {
            double e = r == 3 ? expectedRows[r][c] : expectedRows[r][c] * scale;
            Assert.True(Math.Abs(e - actual[r, c]) <= tolerance, $"affine[{r},{c}]: expected {e}, got {actual[r, c]} (tolerance {tolerance})");
        }
    }
}
