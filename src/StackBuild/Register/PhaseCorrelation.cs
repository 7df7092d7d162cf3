using System.Numerics;
using MathNet.Numerics;
using StackBuild.Imaging;

namespace StackBuild.Register;

/// <summary>Apodisation applied before a Fourier transform so the image edges do not add a false cross.</summary>
public enum ApodisationWindow
{
    None,
    /// <summary>Raised cosine over the whole width and height.</summary>
    Hann,
    /// <summary>Flat in the middle with cosine tapers over the outer <see cref="PhaseCorrelationOptions.TukeyFraction"/> of each side.</summary>
    Tukey,
}

public sealed record PhaseCorrelationOptions
{
    /// <summary>Sub-pixel resolution is 1/UpsampleFactor pixel; 1 gives whole pixels only.</summary>
    public double UpsampleFactor { get; init; } = 20;
    public ApodisationWindow Window { get; init; } = ApodisationWindow.Tukey;
    /// <summary>Fraction of each side that the Tukey window tapers (0 = flat, 1 = Hann).</summary>
    public double TukeyFraction { get; init; } = 0.25;
    /// <summary>Multiply each image by its own feathered tissue mask (smoothed Otsu) before correlating.</summary>
    public bool ForegroundMask { get; init; }
}

/// <summary>
/// A translation estimate: fixed(x, y) ≈ moving(x − Dx, y − Dy), i.e. moving the moving image's content by
/// (Dx, Dy) pixels lays it on the fixed image. <see cref="Peak"/> is the phase-correlation peak height (1 for
/// a perfect circular shift, near 0 for unrelated images); <see cref="PeakToSidelobe"/> is (peak − mean) / std
/// of the correlation surface outside an 11×11 pixel neighbourhood of the peak (common practice; Bolme et al.
/// 2010, CVPR, use the same measure), large for a clear match and ≈ 3–5 for noise.
/// </summary>
public readonly record struct ShiftEstimate(double Dx, double Dy, double Peak, double PeakToSidelobe);

/// <summary>
/// Phase correlation (Kuglin &amp; Hines 1975, Proc. IEEE Int. Conf. Cybernetics and Society, 163–165) with
/// sub-pixel refinement by single-step matrix-multiply DFT upsampling of the cross-power spectrum around the
/// whole-pixel peak (Guizar-Sicairos, Thurman &amp; Fienup 2008, Opt. Lett. 33:156).
/// </summary>
public static class PhaseCorrelation
{
    private const int SidelobeExclusion = 5;

    /// <summary>
    /// The shift that lays <paramref name="moving"/> on <paramref name="fixedImage"/> (same size). Shifts are
    /// found modulo the image size and reported in (−size/2, size/2]. Unrelated images give a low
    /// <see cref="ShiftEstimate.Peak"/> and <see cref="ShiftEstimate.PeakToSidelobe"/>, not an error.
    /// </summary>
    public static ShiftEstimate Estimate(GrayImage fixedImage, GrayImage moving, PhaseCorrelationOptions? options = null)
    {
        options ??= new PhaseCorrelationOptions();
        if (fixedImage.Width != moving.Width || fixedImage.Height != moving.Height)
            throw new ArgumentException("Phase correlation needs two images of the same size.");
        int w = fixedImage.Width, h = fixedImage.Height;
        var window = SeparableWindow(options.Window, options.TukeyFraction, w, h);
        var fft = Fft2D.Create(w, h);
        using var f = Spectrum(fixedImage, window, options.ForegroundMask, fft);
        using var m = Spectrum(moving, window, options.ForegroundMask, fft);
        using var cross = new ComplexImage(w, h);
        using var surface = new ComplexImage(w, h);
        return Correlate(f, m, fft, cross, surface, options.UpsampleFactor);
    }

    private static ComplexImage Spectrum(GrayImage image, float[] window, bool foregroundMask, IFft2D fft)
    {
        var pixels = (float[])image.Pixels.Clone();
        if (foregroundMask)
        {
            var mask = Preprocessing.SoftTissueMask(pixels, image.Width, image.Height);
            for (int i = 0; i < pixels.Length; i++) pixels[i] *= mask[i];
        }
        // Remove the mean so the window's own spectrum does not dominate the correlation.
        float mean = pixels.Average();
        for (int i = 0; i < pixels.Length; i++) pixels[i] = (pixels[i] - mean) * window[i];
        var spectrum = new ComplexImage(image.Width, image.Height);
        spectrum.SetReal(pixels);
        fft.Forward(spectrum);
        return spectrum;
    }

    /// <summary>A 2D window as the outer product of two 1D windows of the given kind.</summary>
    internal static float[] SeparableWindow(ApodisationWindow kind, double tukeyFraction, int width, int height)
    {
        var wx = Window1D(kind, tukeyFraction, width);
        var wy = Window1D(kind, tukeyFraction, height);
        var result = new float[width * height];
        for (int y = 0; y < height; y++) for (int x = 0; x < width; x++) result[y * width + x] = (float)(wx[x] * wy[y]);
        return result;
    }

    private static double[] Window1D(ApodisationWindow kind, double fraction, int n)
    {
        var w = new double[n];
        for (int i = 0; i < n; i++)
        {
            double t = n == 1 ? 0.5 : (i + 0.5) / n; // position in (0, 1)
            w[i] = kind switch
            {
                ApodisationWindow.None => 1,
                ApodisationWindow.Hann => 0.5 - 0.5 * Math.Cos(2 * Math.PI * t),
                _ => TukeyTaper(Math.Min(t, 1 - t), fraction / 2),
            };
        }
        return w;
    }

    /// <summary>Tukey taper at distance <paramref name="edgeDistance"/> from the edge, flat beyond <paramref name="taper"/>.</summary>
    internal static double TukeyTaper(double edgeDistance, double taper) =>
        taper <= 0 || edgeDistance >= taper ? 1 : 0.5 - 0.5 * Math.Cos(Math.PI * Math.Max(0, edgeDistance) / taper);

    /// <summary>
    /// Correlates two spectra of the same size. <paramref name="cross"/> and <paramref name="surface"/> are
    /// scratch buffers of that size (overwritten).
    /// </summary>
    internal static ShiftEstimate Correlate(ComplexImage fixedSpectrum, ComplexImage movingSpectrum, IFft2D fft,
        ComplexImage cross, ComplexImage surface, double upsample)
    {
        int w = fft.Width, h = fft.Height;
        var f = fixedSpectrum.Span;
        var m = movingSpectrum.Span;
        var r = cross.Span;
        for (int i = 0; i < r.Length; i++)
        {
            var p = f[i] * m[i].Conjugate();
            float mag = p.Magnitude;
            r[i] = mag > 1e-20f ? p / mag : Complex32.Zero;
        }
        r.CopyTo(surface.Span);
        fft.Inverse(surface);
        var s = surface.Span;
        int best = 0;
        for (int i = 1; i < s.Length; i++) if (s[i].Real > s[best].Real) best = i;
        int px = best % w, py = best / w;
        double peak = s[best].Real;
        double psr = PeakToSidelobe(s, w, h, px, py, peak);
        double dx = px > w / 2 ? px - w : px, dy = py > h / 2 ? py - h : py;
        if (upsample > 1)
        {
            (dx, dy, double upPeak) = Upsample(r, w, h, dx, dy, upsample);
            peak = upPeak;
        }
        return new ShiftEstimate(dx, dy, peak, psr);
    }

    private static double PeakToSidelobe(Span<Complex32> s, int w, int h, int px, int py, double peak)
    {
        double sum = 0, sumSq = 0;
        long count = 0;
        for (int y = 0; y < h; y++)
        {
            int dy = Math.Abs(y - py);
            bool nearY = Math.Min(dy, h - dy) <= SidelobeExclusion;
            for (int x = 0; x < w; x++)
            {
                if (nearY)
                {
                    int dx = Math.Abs(x - px);
                    if (Math.Min(dx, w - dx) <= SidelobeExclusion) continue;
                }
                double v = s[y * w + x].Real;
                sum += v;
                sumSq += v * v;
                count++;
            }
        }
        if (count < 2) return 0;
        double mean = sum / count, std = Math.Sqrt(Math.Max(0, sumSq / count - mean * mean));
        return std > 0 ? (peak - mean) / std : 0;
    }

    /// <summary>
    /// Guizar-Sicairos et al. (2008): the inverse DFT of the cross-power spectrum evaluated on a grid of
    /// ⌈1.5·U⌉² points spaced 1/U around (dx, dy), as two matrix products. Returns the best grid point and its
    /// height (normalised as the inverse FFT is, so a perfect match gives 1).
    /// </summary>
    private static (double Dx, double Dy, double Peak) Upsample(ReadOnlySpan<Complex32> r, int w, int h, double dx0, double dy0, double upsample)
    {
        int size = (int)Math.Ceiling(1.5 * upsample);
        double centre = Math.Floor(size / 2.0);
        var xs = new double[size];
        var ys = new double[size];
        for (int j = 0; j < size; j++) { xs[j] = dx0 + (j - centre) / upsample; ys[j] = dy0 + (j - centre) / upsample; }
        var kernelX = Kernel(w, xs);   // [kx * size + j]
        var kernelY = Kernel(h, ys);   // [ky * size + i]
        // Step 1: T[ky, j] = Σ_kx R[ky, kx]·e^(2πi·fx·x_j/w), rows in parallel.
        var t = new Complex[h * size];
        var rArray = r.ToArray();
        Parallel.For(0, h, ky =>
        {
            var acc = new Complex[size];
            int rowStart = ky * w;
            for (int kx = 0; kx < w; kx++)
            {
                var v = rArray[rowStart + kx];
                if (v.Real == 0 && v.Imaginary == 0) continue;
                var c = new Complex(v.Real, v.Imaginary);
                int k0 = kx * size;
                for (int j = 0; j < size; j++) acc[j] += c * kernelX[k0 + j];
            }
            acc.CopyTo(t, ky * size);
        });
        // Step 2: out[i, j] = Σ_ky e^(2πi·fy·y_i/h)·T[ky, j].
        double best = double.NegativeInfinity;
        int bi = 0, bj = 0;
        for (int i = 0; i < size; i++)
        for (int j = 0; j < size; j++)
        {
            double re = 0;
            for (int ky = 0; ky < h; ky++)
            {
                var k = kernelY[ky * size + i];
                var v = t[ky * size + j];
                re += k.Real * v.Real - k.Imaginary * v.Imaginary;
            }
            if (re > best) { best = re; bi = i; bj = j; }
        }
        return (xs[bj], ys[bi], best / ((double)w * h));
    }

    /// <summary>e^(2πi·f·p/n) for the signed frequency f of each FFT bin and each position p.</summary>
    private static Complex[] Kernel(int n, double[] positions)
    {
        var k = new Complex[n * positions.Length];
        for (int bin = 0; bin < n; bin++)
        {
            int f = bin < (n + 1) / 2 ? bin : bin - n;
            for (int j = 0; j < positions.Length; j++)
            {
                double a = 2 * Math.PI * f * positions[j] / n;
                k[bin * positions.Length + j] = new Complex(Math.Cos(a), Math.Sin(a));
            }
        }
        return k;
    }
}
