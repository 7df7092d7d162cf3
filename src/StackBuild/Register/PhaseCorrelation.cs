using System.Runtime.Intrinsics;
using MathNet.Numerics;
using StackBuild.Imaging;
using StackBuild.Numerics;

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
    /// <summary>σ of a Gaussian low-pass on the cross-power in cycles per pixel; 0 (default) = plain phase correlation.</summary>
    public double LowPass { get; init; }
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
        var weight = options.LowPass > 0 ? GaussianSpectralWeight(w, h, options.LowPass) : null;
        return Correlate(f, m, fft, cross, surface, options.UpsampleFactor, weight);
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
        ComplexImage cross, ComplexImage surface, double upsample, float[]? spectralWeight = null)
    {
        int w = fft.Width, h = fft.Height;
        CrossPower(fixedSpectrum.Span, movingSpectrum.Span, spectralWeight, cross.Span, surface.Span);
        fft.Inverse(surface);
        var s = surface.Span;
        int best = 0;
        double sum = 0, sumSq = 0;
        for (int i = 0; i < s.Length; i++)
        {
            double v = s[i].Real;
            sum += v;
            sumSq += v * v;
            if (v > s[best].Real) best = i;
        }
        int px = best % w, py = best / w;
        double peak = s[best].Real;
        double psr = PeakToSidelobe(s, w, h, px, py, peak, sum, sumSq);
        double dx = px > w / 2 ? px - w : px, dy = py > h / 2 ? py - h : py;
        if (upsample > 1)
        {
            // Two passes of the same DFT upsampling: 1/4 px over ±0.75 px, then 1/U px over ±0.15 px around
            // that. Same answer as one pass at 1/U over ±0.75 px for a single smooth peak, at half the cost.
            double coarse = Math.Min(upsample, 4);
            (dx, dy, peak) = Upsample(cross, w, h, dx, dy, coarse, (int)Math.Ceiling(1.5 * coarse));
            if (upsample > coarse)
                (dx, dy, peak) = Upsample(cross, w, h, dx, dy, upsample, 2 * (int)Math.Ceiling(0.15 * upsample) + 1);
        }
        return new ShiftEstimate(dx, dy, peak, psr);
    }

    /// <summary>
    /// A Gaussian low-pass over the unshifted spectrum, e^(−½(f/σ)²) with f in cycles per pixel. Weighting the
    /// cross-power by it keeps the high frequencies, where interpolation and noise disturb the phase most, from
    /// biasing the sub-pixel peak (a common refinement of phase correlation).
    /// </summary>
    internal static float[] GaussianSpectralWeight(int w, int h, double sigmaCyclesPerPixel)
    {
        var weight = new float[w * h];
        for (int ky = 0; ky < h; ky++)
        {
            double fy = (ky < (h + 1) / 2 ? ky : ky - h) / (double)h;
            for (int kx = 0; kx < w; kx++)
            {
                double fx = (kx < (w + 1) / 2 ? kx : kx - w) / (double)w;
                weight[ky * w + kx] = (float)Math.Exp(-0.5 * (fx * fx + fy * fy) / (sigmaCyclesPerPixel * sigmaCyclesPerPixel));
            }
        }
        return weight;
    }

    /// <summary>
    /// The normalised cross-power spectrum F·conj(M)/|F·conj(M)| (0 where either spectrum vanishes), times the spectral
    /// weight when there is one, written to both <paramref name="result"/> and <paramref name="copy"/> in one pass.
    /// </summary>
    private static void CrossPower(ReadOnlySpan<Complex32> f, ReadOnlySpan<Complex32> m, float[]? weight, Span<Complex32> result, Span<Complex32> copy)
    {
        if (weight is not null && weight.Length < result.Length) throw new ArgumentException("the spectral weight is smaller than the spectrum", nameof(weight));
        for (int i = 0; i < result.Length; i++)
        {
            float fr = f[i].Real, fi = f[i].Imaginary, mr = m[i].Real, mi = m[i].Imaginary;
            float re = fr * mr + fi * mi, im = fi * mr - fr * mi;
            float mag = MathF.Sqrt(re * re + im * im);
            float cr = 0, ci = 0;
            if (mag > 1e-20f) { cr = re / mag; ci = im / mag; }
            if (weight is not null) { cr *= weight[i]; ci *= weight[i]; }
            result[i] = copy[i] = new Complex32(cr, ci);
        }
    }

    /// <summary>PSR from the whole surface's sums minus those of the excluded neighbourhood of the peak.</summary>
    private static double PeakToSidelobe(Span<Complex32> s, int w, int h, int px, int py, double peak, double sum, double sumSq)
    {
        long count = (long)w * h;
        // Distinct rows and columns of the neighbourhood (it wraps onto itself on images under 11 px).
        var rows = Enumerable.Range(-SidelobeExclusion, 2 * SidelobeExclusion + 1).Select(d => ((py + d) % h + h) % h).Distinct().ToArray();
        var cols = Enumerable.Range(-SidelobeExclusion, 2 * SidelobeExclusion + 1).Select(d => ((px + d) % w + w) % w).Distinct().ToArray();
        foreach (int y in rows)
        foreach (int x in cols)
        {
            double v = s[y * w + x].Real;
            sum -= v;
            sumSq -= v * v;
            count--;
        }
        if (count < 2) return 0;
        double mean = sum / count, std = Math.Sqrt(Math.Max(0, sumSq / count - mean * mean));
        return std > 0 ? (peak - mean) / std : 0;
    }

    /// <summary>
    /// Guizar-Sicairos et al. (2008): the inverse DFT of the cross-power spectrum evaluated on a size×size grid
    /// spaced 1/U around (dx, dy), as two matrix products. Returns the best grid point and its height
    /// (normalised as the inverse FFT is, so a perfect match gives 1).
    /// </summary>
    private static unsafe (double Dx, double Dy, double Peak) Upsample(ComplexImage cross, int w, int h, double dx0, double dy0, double upsample, int size)
    {
        double centre = Math.Floor(size / 2.0);
        var xs = new double[size];
        var ys = new double[size];
        for (int j = 0; j < size; j++) { xs[j] = dx0 + (j - centre) / upsample; ys[j] = dy0 + (j - centre) / upsample; }
        int half = w / 2;
        // The grid's columns padded to whole vectors of four: each lane sums exactly the terms, in exactly the order, that a
        // loop over one column would, so the result is the same bit for bit (.NET never fuses a multiply and an add).
        int stride = (size + 3) & ~3;
        var (kxRe, kxIm) = Kernel(w, xs, half + 1, stride, ref _kxRe, ref _kxIm);   // [kx * stride + j]; only kx = 0…w/2 is used
        var (kyRe, kyIm) = Kernel(h, ys, h, size, ref _kyRe, ref _kyIm);            // [ky * size + i]
        // Step 1: T[ky, j] = Σ_kx c·R[ky, kx]·e^(2πi·fx·x_j/w) over kx = 0…w/2 only. Both images are real, so
        // R is Hermitian (R(−k) = conj R(k)) and the real part we need counts each column kx and its mirror −kx
        // alike: c = 2 for the columns that have a distinct mirror, 1 for kx = 0 and the Nyquist column.
        var tRe = Scratch(ref _tRe, h * stride);   // every element up to h · stride is written below before it is read
        var tIm = Scratch(ref _tIm, h * stride);
        var row0 = (Complex32*)cross.Pointer;
        // One thread: pairs are registered in parallel already, so a parallel loop here only adds its overhead.
        fixed (double* exRe = kxRe, exIm = kxIm, outRe = tRe, outIm = tIm)
        {
            for (int ky = 0; ky < h; ky++)
            {
                var row = row0 + (long)ky * w;
                for (int j0 = 0; j0 < stride; j0 += 4)
                {
                    var aRe = Vector256<double>.Zero;
                    var aIm = Vector256<double>.Zero;
                    for (int kx = 0; kx <= half; kx++)
                    {
                        double c = kx == 0 || 2 * kx == w ? 1 : 2;
                        var vr = Vector256.Create(c * row[kx].Real);
                        var vi = Vector256.Create(c * row[kx].Imaginary);
                        var er = Vector256.Load(exRe + kx * stride + j0);
                        var ei = Vector256.Load(exIm + kx * stride + j0);
                        aRe += vr * er - vi * ei;
                        aIm += vr * ei + vi * er;
                    }
                    aRe.Store(outRe + ky * stride + j0);
                    aIm.Store(outIm + ky * stride + j0);
                }
            }
        }
        // Step 2: Re out[i, j] = Re Σ_ky e^(2πi·fy·y_i/h)·T[ky, j].
        double best = double.NegativeInfinity;
        int bi = 0, bj = 0;
        Span<double> sums = stackalloc double[stride];
        fixed (double* tr = tRe, ti = tIm)
        {
            for (int i = 0; i < size; i++)
            {
                for (int j0 = 0; j0 < stride; j0 += 4)
                {
                    var re = Vector256<double>.Zero;
                    for (int ky = 0; ky < h; ky++)
                        re += Vector256.Create(kyRe[ky * size + i]) * Vector256.Load(tr + ky * stride + j0)
                            - Vector256.Create(kyIm[ky * size + i]) * Vector256.Load(ti + ky * stride + j0);
                    re.CopyTo(sums[j0..]);
                }
                for (int j = 0; j < size; j++)
                    if (sums[j] > best) { best = sums[j]; bi = i; bj = j; }
            }
        }
        return (xs[bj], ys[bi], best / ((double)w * h));
    }

    /// <summary>
    /// e^(2πi·f·p/n) (real and imaginary parts) for the signed frequency f of the first <paramref name="bins"/> FFT bins and
    /// each position p, laid out [bin * <paramref name="stride"/> + j] (lanes past the positions are 0).
    /// </summary>
    private static (double[] Re, double[] Im) Kernel(int n, double[] positions, int bins, int stride, ref double[]? reBuffer, ref double[]? imBuffer)
    {
        var re = Scratch(ref reBuffer, bins * stride);
        var im = Scratch(ref imBuffer, bins * stride);
        Array.Clear(re, 0, bins * stride);
        Array.Clear(im, 0, bins * stride);
        for (int bin = 0; bin < bins; bin++)
        {
            int f = bin < (n + 1) / 2 ? bin : bin - n;
            for (int j = 0; j < positions.Length; j++)
            {
                double a = 2 * Math.PI * f * positions[j] / n;
                re[bin * stride + j] = Math.Cos(a);
                im[bin * stride + j] = Math.Sin(a);
            }
        }
        return (re, im);
    }

    // Each thread keeps the DFT upsampling's kernels and partial sums for its next call: they are a few tens of kilobytes a
    // call, two calls a hypothesis, and a build's thousands of hypotheses otherwise allocate gigabytes of them. The arrays
    // may be longer than a call needs; every index used is computed from the call's own sizes.
    [ThreadStatic] private static double[]? _kxRe, _kxIm, _kyRe, _kyIm, _tRe, _tIm;

    private static double[] Scratch(ref double[]? buffer, int length)
    {
        if (buffer is null || buffer.Length < length) buffer = new double[length];
        return buffer;
    }
}
