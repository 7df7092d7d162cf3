using MathNet.Numerics;
using MathNet.Numerics.IntegralTransforms;
using StackBuild.Imaging;

namespace StackBuild.Register;

/// <summary>
/// Rotation from Fourier magnitude spectra resampled onto a log-polar grid (Reddy &amp; Chatterji 1996, IEEE
/// Trans. Image Process. 5:1266). The magnitude spectrum ignores translation and turns with the image, so a
/// rotation becomes a circular shift along the angle axis. A real image's magnitude spectrum repeats every
/// 180°, so angles come out modulo 180° and each candidate θ must also be tried as θ + 180°.
/// </summary>
internal sealed class PolarSpectrum
{
    public const int Angles = 360;            // over [0°, 180°): 0.5° a bin
    public const int Radii = 64;
    public const double DegreesPerBin = 180.0 / Angles;
    private const double HighestFrequency = 0.4; // cycles per pixel; area reduction damps what lies above

    private readonly Complex32[][] _rows;          // FFT along angle of each standardised radius row
    private readonly Complex32[][] _mirroredRows;  // the same for the image mirrored left-right

    private PolarSpectrum(Complex32[][] rows, Complex32[][] mirroredRows)
    {
        _rows = rows;
        _mirroredRows = mirroredRows;
    }

    /// <summary>From the (unshifted) 2D spectrum of an n×n windowed image.</summary>
    public static PolarSpectrum FromSpectrum(ReadOnlySpan<Complex32> spectrum, int n)
    {
        // High-pass emphasis of Reddy & Chatterji: H = (1 − X)(2 − X), X = cos(πξ)cos(πη), ξ, η ∈ [−½, ½].
        var magnitude = new float[n * n];
        for (int ky = 0; ky < n; ky++)
        {
            double eta = (ky < (n + 1) / 2 ? ky : ky - n) / (double)n;
            for (int kx = 0; kx < n; kx++)
            {
                double xi = (kx < (n + 1) / 2 ? kx : kx - n) / (double)n;
                double x = Math.Cos(Math.PI * xi) * Math.Cos(Math.PI * eta);
                magnitude[ky * n + kx] = (float)Math.Log(1 + (1 - x) * (2 - x) * spectrum[ky * n + kx].Magnitude);
            }
        }
        double lowest = Math.Min(3.0 / n, HighestFrequency / 4);
        var polar = new double[Radii][];
        for (int r = 0; r < Radii; r++)
        {
            double rho = lowest * Math.Pow(HighestFrequency / lowest, r / (double)(Radii - 1)) * n; // in bins
            var row = polar[r] = new double[Angles];
            for (int a = 0; a < Angles; a++)
            {
                double phi = a * DegreesPerBin * Math.PI / 180;
                row[a] = Bilinear.Periodic(magnitude, n, rho * Math.Cos(phi), rho * Math.Sin(phi));
            }
            Standardise(row);
        }
        return new PolarSpectrum(polar.Select(AngleSpectrum).ToArray(), polar.Select(row => AngleSpectrum(Mirror(row))).ToArray());
    }

    /// <summary>
    /// Mirroring the image left-right maps the spectrum's angle φ to 180° − φ, i.e. bin a to (A − a) mod A.
    /// </summary>
    private static double[] Mirror(double[] row)
    {
        var m = new double[row.Length];
        for (int a = 0; a < row.Length; a++) m[a] = row[(row.Length - a) % row.Length];
        return m;
    }

    private static void Standardise(double[] row)
    {
        double mean = row.Average(), variance = row.Sum(v => (v - mean) * (v - mean)) / row.Length;
        double inv = variance > 1e-20 ? 1 / Math.Sqrt(variance) : 0;
        for (int i = 0; i < row.Length; i++) row[i] = (row[i] - mean) * inv;
    }

    private static Complex32[] AngleSpectrum(double[] row)
    {
        var c = row.Select(v => new Complex32((float)v, 0)).ToArray();
        Fourier.Forward(c, FourierOptions.NoScaling);
        return c;
    }

    /// <summary>
    /// Candidate angles θ (degrees, in [0°, 180°)) by which the moving image, mirrored first when asked, is
    /// turned relative to the fixed one: the strongest <paramref name="count"/> peaks of the circular
    /// cross-correlation along angle, summed over radii, refined by a parabola through the peak bin and its
    /// neighbours. Each comes with its correlation score (for ordering only).
    /// </summary>
    public static List<(double Degrees, double Score)> CandidateAngles(PolarSpectrum fixedSpectrum, PolarSpectrum moving, bool mirrored, int count)
    {
        var movingRows = mirrored ? moving._mirroredRows : moving._rows;
        var acc = new Complex32[Angles];
        for (int r = 0; r < Radii; r++)
        {
            var f = fixedSpectrum._rows[r];
            var m = movingRows[r];
            for (int k = 0; k < Angles; k++) acc[k] += f[k] * m[k].Conjugate();
        }
        Fourier.Inverse(acc, FourierOptions.NoScaling);
        var c = acc.Select(v => (double)v.Real).ToArray();
        var peaks = new List<(double, double)>();
        var order = Enumerable.Range(0, Angles).Where(k => c[k] >= c[(k + 1) % Angles] && c[k] >= c[(k + Angles - 1) % Angles])
            .OrderByDescending(k => c[k]);
        foreach (int k in order)
        {
            if (peaks.Count == count) break;
            double left = c[(k + Angles - 1) % Angles], right = c[(k + 1) % Angles], denominator = left - 2 * c[k] + right;
            double offset = denominator < 0 ? Math.Clamp(0.5 * (left - right) / denominator, -0.5, 0.5) : 0;
            double degrees = ((k + offset) * DegreesPerBin + 180) % 180;
            if (peaks.Any(p => AngularDistance(p.Item1, degrees, 180) < 3 * DegreesPerBin)) continue;
            peaks.Add((degrees, c[k] / (Radii * Angles)));
        }
        return peaks;
    }

    /// <summary>Distance between two angles on a circle of the given period.</summary>
    public static double AngularDistance(double a, double b, double period = 360)
    {
        double d = Math.Abs(a - b) % period;
        return Math.Min(d, period - d);
    }
}
