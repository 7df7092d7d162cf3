using System.Diagnostics;
using System.Globalization;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// A rigid 3D transform as elastix writes it for an EulerTransform: it maps a point of the fixed image to the
/// moving image, both in ITK's physical space (LPS+ millimetres), as x ↦ R (x − c) + c + t, with
/// R = Rz·Rx·Ry (ITK's Euler3DTransform with ComputeZYX false; Rz·Ry·Rx when true).
/// </summary>
/// <param name="AnglesRadians">rx, ry, rz: rotations about the LPS x, y and z axes.</param>
/// <param name="TranslationMm">tx, ty, tz in LPS millimetres.</param>
/// <param name="CentreMm">CenterOfRotationPoint in LPS millimetres.</param>
internal sealed record EulerTransform(double[] AnglesRadians, double[] TranslationMm, double[] CentreMm, bool ComputeZyx)
{
    /// <summary>
    /// The same map in NIfTI's RAS+ world (fixed world → moving world). ITK reads a NIfTI file's RAS+ affine into
    /// LPS+ by negating x and y (F = diag(−1, −1, 1)), so the RAS map is F·T·F.
    /// </summary>
    public Affine ToRas()
    {
        double[,] r = Rotation();
        double[] f = [-1, -1, 1];
        var rows = new double[3][];
        for (int i = 0; i < 3; i++)
        {
            rows[i] = new double[4];
            for (int j = 0; j < 3; j++) rows[i][j] = f[i] * r[i, j] * f[j];
        }
        // LPS: y = R x + (c − R c + t). In RAS: y' = F R F x' + F (c − R c + t).
        for (int i = 0; i < 3; i++)
        {
            double offset = CentreMm[i] + TranslationMm[i];
            for (int j = 0; j < 3; j++) offset -= r[i, j] * CentreMm[j];
            rows[i][3] = f[i] * offset;
        }
        return Affine.FromRows(rows[0], rows[1], rows[2]);
    }

    private double[,] Rotation()
    {
        double a = AnglesRadians[0], b = AnglesRadians[1], g = AnglesRadians[2];
        double[,] rx = { { 1, 0, 0 }, { 0, Math.Cos(a), -Math.Sin(a) }, { 0, Math.Sin(a), Math.Cos(a) } };
        double[,] ry = { { Math.Cos(b), 0, Math.Sin(b) }, { 0, 1, 0 }, { -Math.Sin(b), 0, Math.Cos(b) } };
        double[,] rz = { { Math.Cos(g), -Math.Sin(g), 0 }, { Math.Sin(g), Math.Cos(g), 0 }, { 0, 0, 1 } };
        return ComputeZyx ? Rigid3D.Multiply(rz, Rigid3D.Multiply(ry, rx)) : Rigid3D.Multiply(rz, Rigid3D.Multiply(rx, ry));
    }
}

/// <summary>One elastix run: the transform it found, the moving image resampled onto the fixed grid, and how long it took.</summary>
internal sealed record ElastixRun(EulerTransform Transform, Volume Result, double Seconds, string Log);

/// <summary>
/// Runs elastix (Klein, Staring, Murphy, Viergever, Pluim 2010, IEEE TMI 29:196; Debian package <c>elastix</c>),
/// a general-purpose registration toolbox, as an outside client of StackBuild's volumes: a rigid, mutual-
/// information registration of a candidate volume (moving) onto a reference volume (fixed).
/// </summary>
internal static class ElastixSupport
{
    public const string InstallHint = "install elastix (apt-get install elastix; tests/run.sh does this as root)";

    /// <summary>The elastix program on PATH; fails the test with the install hint when it is missing.</summary>
    public static string Program()
    {
        foreach (var dir in (Environment.GetEnvironmentVariable("PATH") ?? "/usr/bin").Split(':').Append("/usr/bin"))
        {
            var path = Path.Combine(dir, "elastix");
            if (File.Exists(path)) return path;
        }
        Assert.Fail($"elastix is not on PATH: {InstallHint}");
        return "";
    }

    /// <summary>
    /// Parameter text for a rigid (Euler) registration driven by Mattes mutual information (Mattes et al. 2003,
    /// IEEE TMI 22:120), multi-resolution, started by a centred transform initialiser. The parameter names are
    /// elastix's own (elastix manual, "parameter file"); the values (resolutions, iterations, samples, bins) are
    /// this project's choice for small volumes, set so one run takes a few seconds.
    /// </summary>
    /// <param name="initialisation">"GeometricalCenter" (grid centres) or "CenterOfGravity" (intensity centroids).</param>
    public static string RigidParameters(string initialisation = "GeometricalCenter", int resolutions = 3, int iterations = 200, int samples = 2048) =>
        string.Join('\n',
            "(FixedInternalImagePixelType \"float\")",
            "(MovingInternalImagePixelType \"float\")",
            "(FixedImageDimension 3)",
            "(MovingImageDimension 3)",
            "(UseDirectionCosines \"true\")",
            "(Registration \"MultiResolutionRegistration\")",
            "(Interpolator \"BSplineInterpolator\")",
            "(ResampleInterpolator \"FinalBSplineInterpolator\")",
            "(Resampler \"DefaultResampler\")",
            "(FixedImagePyramid \"FixedSmoothingImagePyramid\")",
            "(MovingImagePyramid \"MovingSmoothingImagePyramid\")",
            "(Optimizer \"AdaptiveStochasticGradientDescent\")",
            "(Transform \"EulerTransform\")",
            "(Metric \"AdvancedMattesMutualInformation\")",
            "(AutomaticScalesEstimation \"true\")",
            "(AutomaticTransformInitialization \"true\")",
            $"(AutomaticTransformInitializationMethod \"{initialisation}\")",
            "(HowToCombineTransforms \"Compose\")",
            "(NumberOfHistogramBins 32)",
            $"(NumberOfResolutions {resolutions})",
            $"(MaximumNumberOfIterations {iterations})",
            $"(NumberOfSpatialSamples {samples})",
            "(NewSamplesEveryIteration \"true\")",
            "(ImageSampler \"RandomCoordinate\")",
            "(BSplineInterpolationOrder 1)",
            "(FinalBSplineInterpolationOrder 1)",
            "(DefaultPixelValue 0)",
            "(WriteResultImage \"true\")",
            "(ResultImagePixelType \"float\")",
            "(ResultImageFormat \"nii\")",
            "");

    /// <summary>
    /// Registers <paramref name="movingPath"/> onto <paramref name="fixedPath"/> (NIfTI files; elastix takes their
    /// physical geometry from the headers) in <paramref name="workFolder"/>; fails the test when elastix is
    /// missing, fails or does not finish within two minutes (the limit of <see cref="NiftiPython.Process"/>).
    /// </summary>
    public static ElastixRun RegisterRigid(string fixedPath, string movingPath, string workFolder, string? parameters = null)
    {
        var program = Program();
        Directory.CreateDirectory(workFolder);
        var parameterFile = Path.Combine(workFolder, "rigid.txt");
        File.WriteAllText(parameterFile, parameters ?? RigidParameters());
        var clock = Stopwatch.StartNew();
        var (exit, stdout, stderr) = NiftiPython.Process(program, ["-f", fixedPath, "-m", movingPath, "-p", parameterFile, "-out", workFolder]);
        double seconds = clock.Elapsed.TotalSeconds;
        var transformFile = Path.Combine(workFolder, "TransformParameters.0.txt");
        var resultFile = Path.Combine(workFolder, "result.0.nii");
        if (exit != 0 || !File.Exists(transformFile) || !File.Exists(resultFile))
            Assert.Fail($"elastix failed (exit code {exit}): {Tail(stdout + stderr, 1500)}");
        return new ElastixRun(ReadEuler(transformFile), NiftiFile.Read(resultFile).ToVolume(), seconds, stdout);
    }

    /// <summary>Reads TransformParameters.0.txt of an EulerTransform: six parameters and the centre of rotation.</summary>
    public static EulerTransform ReadEuler(string path)
    {
        var text = File.ReadAllLines(path);
        string transform = Values(text, "Transform", path)[0].Trim('"');
        Assert.True(transform == "EulerTransform", $"{path}: expected an EulerTransform, found {transform}");
        var p = Values(text, "TransformParameters", path).Select(Number).ToArray();
        var c = Values(text, "CenterOfRotationPoint", path).Select(Number).ToArray();
        Assert.True(p.Length == 6 && c.Length == 3, $"{path}: expected 6 parameters and a 3D centre, found {p.Length} and {c.Length}");
        bool zyx = text.Any(l => l.StartsWith("(ComputeZYX ", StringComparison.Ordinal)) && Values(text, "ComputeZYX", path)[0].Trim('"') == "true";
        return new EulerTransform(p[..3], p[3..], c, zyx);
    }

    private static string[] Values(string[] lines, string name, string path)
    {
        var line = lines.FirstOrDefault(l => l.StartsWith($"({name} ", StringComparison.Ordinal));
        Assert.True(line is not null, $"{path} has no ({name} ...) entry");
        return line![(name.Length + 2)..].TrimEnd(')', ' ').Split(' ', StringSplitOptions.RemoveEmptyEntries);
    }

    private static double Number(string s) => double.Parse(s, NumberStyles.Float, CultureInfo.InvariantCulture);

    private static string Tail(string text, int n) => text.Length <= n ? text : "…" + text[^n..];

    /// <summary>Pearson's correlation coefficient of two equally sized volumes, voxel by voxel (optionally only where <paramref name="mask"/> is true).</summary>
    public static double Pearson(Volume a, Volume b, bool[]? mask = null)
    {
        Assert.Equal(a.Voxels.Length, b.Voxels.Length);
        double n = 0, sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
        for (int i = 0; i < a.Voxels.Length; i++)
        {
            if (mask is not null && !mask[i]) continue;
            double x = a.Voxels[i], y = b.Voxels[i];
            n++; sa += x; sb += y; saa += x * x; sbb += y * y; sab += x * y;
        }
        double cov = sab - sa * sb / n, va = saa - sa * sa / n, vb = sbb - sb * sb / n;
        return cov / Math.Sqrt(va * vb);
    }

    /// <summary>
    /// The moving volume resampled onto the fixed volume's grid through <paramref name="fixedToMovingWorld"/>
    /// (RAS+ mm → RAS+ mm), trilinear, 0 outside (edge convention as ITK's): what a registration's result image is for a known transform.
    /// </summary>
    public static Volume Resample(Volume moving, Volume fixedGrid, Affine fixedToMovingWorld)
    {
        var voxelMap = fixedGrid.Affine.Then(fixedToMovingWorld).Then(moving.Affine.Inverse());
        var result = new Volume(fixedGrid.Nx, fixedGrid.Ny, fixedGrid.Nz, fixedGrid.Affine);
        for (int k = 0; k < fixedGrid.Nz; k++)
        for (int j = 0; j < fixedGrid.Ny; j++)
        for (int i = 0; i < fixedGrid.Nx; i++)
        {
            var (x, y, z) = voxelMap.Apply(i, j, k);
            result[i, j, k] = Trilinear(moving, x, y, z);
        }
        return result;
    }

    /// <summary>
    /// Trilinear sample at a continuous voxel index. As ITK's interpolators do (and so elastix's result image), a
    /// point within half a voxel outside the outermost voxel centres takes the edge value; beyond that it is 0.
    /// </summary>
    private static float Trilinear(Volume v, double x, double y, double z)
    {
        if (x < -0.5 || y < -0.5 || z < -0.5 || x > v.Nx - 0.5 || y > v.Ny - 0.5 || z > v.Nz - 0.5) return 0;
        x = Math.Clamp(x, 0, v.Nx - 1); y = Math.Clamp(y, 0, v.Ny - 1); z = Math.Clamp(z, 0, v.Nz - 1);
        int i = Math.Min((int)x, Math.Max(0, v.Nx - 2)), j = Math.Min((int)y, Math.Max(0, v.Ny - 2)), k = Math.Min((int)z, Math.Max(0, v.Nz - 2));
        double fx = x - i, fy = y - j, fz = z - k;
        double Sample(int di, int dj, int dk) => v[Math.Min(i + di, v.Nx - 1), Math.Min(j + dj, v.Ny - 1), Math.Min(k + dk, v.Nz - 1)];
        double c00 = Sample(0, 0, 0) * (1 - fx) + Sample(1, 0, 0) * fx;
        double c10 = Sample(0, 1, 0) * (1 - fx) + Sample(1, 1, 0) * fx;
        double c01 = Sample(0, 0, 1) * (1 - fx) + Sample(1, 0, 1) * fx;
        double c11 = Sample(0, 1, 1) * (1 - fx) + Sample(1, 1, 1) * fx;
        return (float)((c00 * (1 - fy) + c10 * fy) * (1 - fz) + (c01 * (1 - fy) + c11 * fy) * fz);
    }

    /// <summary>
    /// Averages 2 × 2 in-plane blocks (i, j), keeping every plane k; the affine moves each new voxel centre to the
    /// centre of its block, so the volume keeps its place in the world. An odd last column or row is dropped.
    /// </summary>
    public static Volume HalveInPlane(Volume v)
    {
        int nx = v.Nx / 2, ny = v.Ny / 2;
        var affine = Affine.FromRows([2, 0, 0, 0.5], [0, 2, 0, 0.5], [0, 0, 1, 0]).Then(v.Affine);
        var result = new Volume(nx, ny, v.Nz, affine);
        for (int k = 0; k < v.Nz; k++)
        for (int j = 0; j < ny; j++)
        for (int i = 0; i < nx; i++)
            result[i, j, k] = (v[2 * i, 2 * j, k] + v[2 * i + 1, 2 * j, k] + v[2 * i, 2 * j + 1, k] + v[2 * i + 1, 2 * j + 1, k]) / 4;
        return result;
    }
}

/// <summary>Small 3D rigid-geometry helpers for comparing transforms.</summary>
internal static class Rigid3D
{
    public static double[,] Multiply(double[,] a, double[,] b)
    {
        var r = new double[3, 3];
        for (int i = 0; i < 3; i++) for (int j = 0; j < 3; j++) for (int t = 0; t < 3; t++) r[i, j] += a[i, t] * b[t, j];
        return r;
    }

    public static double[,] Linear(Affine a)
    {
        var r = new double[3, 3];
        for (int i = 0; i < 3; i++) for (int j = 0; j < 3; j++) r[i, j] = a[i, j];
        return r;
    }

    /// <summary>Angle in degrees of the rotation that takes <paramref name="a"/>'s linear part to <paramref name="b"/>'s (both rotations): acos((trace(Bᵀ·A) − 1) / 2).</summary>
    public static double AngleBetweenDegrees(Affine a, Affine b)
    {
        var la = Linear(a);
        var lb = Linear(b);
        double trace = 0;
        for (int i = 0; i < 3; i++) for (int t = 0; t < 3; t++) trace += lb[t, i] * la[t, i];
        return Math.Acos(Math.Clamp((trace - 1) / 2, -1, 1)) * 180 / Math.PI;
    }

    /// <summary>Rotation by <paramref name="degrees"/> about the world's anterior (RAS y) axis, right-handed: the plane of a RIP series.</summary>
    public static Affine AboutAnterior(double degrees)
    {
        double t = degrees * Math.PI / 180, c = Math.Cos(t), s = Math.Sin(t);
        return Affine.FromRows([c, 0, s, 0], [0, 1, 0, 0], [-s, 0, c, 0]);
    }

    /// <summary>Signed angle in degrees of the rotation part about the anterior axis (as <see cref="AboutAnterior"/> makes it).</summary>
    public static double AngleAboutAnteriorDegrees(Affine a) => Math.Atan2(a[0, 2], a[0, 0]) * 180 / Math.PI;

    /// <summary>
    /// Least-squares rigid map dst ≈ R·src + t with R a proper rotation (Arun, Huang, Blostein 1987, IEEE TPAMI
    /// 9:698, with the reflection guard of Umeyama 1991, IEEE TPAMI 13:376); <paramref name="rmsMm"/> is the
    /// root-mean-square residual.
    /// </summary>
    public static Affine FitRigid(IReadOnlyList<(double X, double Y, double Z)> src, IReadOnlyList<(double X, double Y, double Z)> dst, out double rmsMm)
    {
        int n = src.Count;
        double[] cs = [src.Average(p => p.X), src.Average(p => p.Y), src.Average(p => p.Z)];
        double[] cd = [dst.Average(p => p.X), dst.Average(p => p.Y), dst.Average(p => p.Z)];
        var h = MathNet.Numerics.LinearAlgebra.Matrix<double>.Build.Dense(3, 3);
        for (int q = 0; q < n; q++)
        {
            double[] a = [src[q].X - cs[0], src[q].Y - cs[1], src[q].Z - cs[2]];
            double[] b = [dst[q].X - cd[0], dst[q].Y - cd[1], dst[q].Z - cd[2]];
            for (int i = 0; i < 3; i++) for (int j = 0; j < 3; j++) h[i, j] += a[i] * b[j];
        }
        var svd = h.Svd();
        var u = svd.U;
        var v = svd.VT.Transpose();
        var d = MathNet.Numerics.LinearAlgebra.Matrix<double>.Build.DenseIdentity(3);
        d[2, 2] = Math.Sign((v * u.Transpose()).Determinant());
        var r = v * d * u.Transpose();
        var rows = new double[3][];
        for (int i = 0; i < 3; i++)
            rows[i] = [r[i, 0], r[i, 1], r[i, 2], cd[i] - (r[i, 0] * cs[0] + r[i, 1] * cs[1] + r[i, 2] * cs[2])];
        var fit = Affine.FromRows(rows[0], rows[1], rows[2]);
        double sum = 0;
        for (int q = 0; q < n; q++)
        {
            var m = fit.Apply(src[q].X, src[q].Y, src[q].Z);
            sum += (m.X - dst[q].X) * (m.X - dst[q].X) + (m.Y - dst[q].Y) * (m.Y - dst[q].Y) + (m.Z - dst[q].Z) * (m.Z - dst[q].Z);
        }
        rmsMm = Math.Sqrt(sum / n);
        return fit;
    }

    /// <summary>Mean distance in mm between where two maps send the given points.</summary>
    public static double MeanDistanceMm(Affine a, Affine b, IEnumerable<(double X, double Y, double Z)> points) =>
        points.Average(p =>
        {
            var u = a.Apply(p.X, p.Y, p.Z);
            var v = b.Apply(p.X, p.Y, p.Z);
            return Math.Sqrt((u.X - v.X) * (u.X - v.X) + (u.Y - v.Y) * (u.Y - v.Y) + (u.Z - v.Z) * (u.Z - v.Z));
        });
}
