using StackBuild.Imaging;

namespace StackBuild.Render;

/// <summary>How a missing plane is filled from its nearest placed neighbours.</summary>
public enum GapFill
{
    /// <summary>Left as rendered (empty).</summary>
    None,
    /// <summary>Linear blend of the two neighbours, weighted by distance.</summary>
    Linear,
    /// <summary>Registration-based: both neighbours warped part of the way along a dense optical flow, then blended.</summary>
    Flow,
}

/// <summary>Interpolation of a missing plane between two aligned neighbouring planes.</summary>
public static class GapFiller
{
    /// <summary>
    /// The plane at fraction <paramref name="t"/> (0 = <paramref name="below"/>, 1 = <paramref name="above"/>) between two
    /// planes of <paramref name="width"/> × <paramref name="height"/> voxels. <see cref="GapFill.Linear"/> (and
    /// <see cref="GapFill.None"/>) blend (1 − t)·below + t·above. <see cref="GapFill.Flow"/> finds one displacement field d
    /// on the grid of the missing plane itself (<see cref="SymmetricFlow"/>), so that below(x − t·d) ≈ above(x + (1 − t)·d),
    /// and blends those two warped planes with the same weights: structure that moves between the sections moves part
    /// of the way instead of showing twice, and both neighbours are warped by the same field. The warped planes are
    /// sampled by cubic convolution (<see cref="FlowOptions.CubicBlend"/>), so sub-pixel warping does not blur; where the
    /// two warped planes still disagree the fill leans towards the linear blend (<see cref="FlowOptions.ConfidenceSigma"/>).
    /// A flat or empty pair gives the linear blend; the result never holds NaN for finite input. <paramref name="t"/> is clamped to [0, 1].
    /// </summary>
    public static float[] Interpolate(ReadOnlySpan<float> below, ReadOnlySpan<float> above, int width, int height, double t, GapFill method) =>
        Interpolate(below, above, width, height, t, method, new FlowOptions());

    /// <summary>
    /// <see cref="Interpolate(ReadOnlySpan{float}, ReadOnlySpan{float}, int, int, double, GapFill)"/> written into
    /// <paramref name="destination"/>: the linear blend takes no memory of its own (a plane-by-plane render at a large grid
    /// would otherwise leave a plane of garbage per gap); the flow fill's result is copied in.
    /// </summary>
    public static void InterpolateInto(ReadOnlySpan<float> below, ReadOnlySpan<float> above, int width, int height, double t, GapFill method,
        Span<float> destination)
    {
        if (width <= 0 || height <= 0 || below.Length != width * height || above.Length != width * height || destination.Length < width * height)
            throw new ArgumentException($"Both planes and the destination must hold {width} × {height} values.");
        t = double.IsNaN(t) ? 0.5 : Math.Clamp(t, 0, 1);
        if (method != GapFill.Flow || t == 0 || t == 1)
        {
            float wa = (float)(1 - t), wb = (float)t;
            for (int i = 0; i < below.Length; i++) destination[i] = wa * below[i] + wb * above[i];
            return;
        }
        Interpolate(below, above, width, height, t, method).CopyTo(destination);
    }

    /// <inheritdoc cref="Interpolate(ReadOnlySpan{float}, ReadOnlySpan{float}, int, int, double, GapFill)"/>
    public static float[] Interpolate(ReadOnlySpan<float> below, ReadOnlySpan<float> above, int width, int height, double t, GapFill method, FlowOptions options)
    {
        if (width <= 0 || height <= 0 || below.Length != width * height || above.Length != width * height)
            throw new ArgumentException($"Both planes must hold {width} × {height} values.");
        t = double.IsNaN(t) ? 0.5 : Math.Clamp(t, 0, 1);
        var result = new float[width * height];
        float wa = (float)(1 - t), wb = (float)t;
        if (method != GapFill.Flow || t == 0 || t == 1)
        {
            for (int i = 0; i < result.Length; i++) result[i] = wa * below[i] + wb * above[i];
            return result;
        }
        var a = new GrayImage(width, height, below.ToArray());
        var b = new GrayImage(width, height, above.ToArray());
        var (u, v) = SymmetricFlow(a, b, t, options);
        var residual = new GrayImage(width, height); // squared warping residual, for the optional confidence
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            int i = y * width + x;
            float fromA = options.CubicBlend ? SampleCubic(a, x - t * u[i], y - t * v[i]) : Bilinear.SampleEdgeClamped(a, x - t * u[i], y - t * v[i]);
            float fromB = options.CubicBlend ? SampleCubic(b, x + (1 - t) * u[i], y + (1 - t) * v[i]) : Bilinear.SampleEdgeClamped(b, x + (1 - t) * u[i], y + (1 - t) * v[i]);
            result[i] = wa * fromA + wb * fromB;
            residual.Pixels[i] = (fromB - fromA) * (fromB - fromA);
        }
        if (options.ConfidenceSigma > 0)
        {
            double spread = Spread(a.Pixels, b.Pixels);
            if (options.ConfidenceWindow > 0) residual = GaussianFilter.Blur(residual, options.ConfidenceWindow);
            double s2 = options.ConfidenceSigma * options.ConfidenceSigma * spread * spread;
            for (int i = 0; i < result.Length; i++)
            {
                float lambda = (float)(1 / (1 + residual.Pixels[i] / s2));
                float linear = wa * below[i] + wb * above[i];
                result[i] = lambda * result[i] + (1 - lambda) * linear;
            }
        }
        return result;
    }

    public sealed record FlowOptions
    {
        /// <summary>
        /// Smoothness weight α, for intensities scaled to unit robust spread (p95 − p5 of the pair) and then locally
        /// normalised (<see cref="LocalNormalizeSigma"/>). What counts is α over the normalisation's contrast factor (0.36):
        /// scaling the data by s is the same as dividing α by s for the quadratic terms. Chosen on GapFillTests; the
        /// measurements are in docs/gap-fill.md.
        /// </summary>
        public double Alpha { get; init; } = 0.5;
        public int IterationsPerWarp { get; init; } = 40;
        public int WarpsPerLevel { get; init; } = 2;
        /// <summary>The coarsest pyramid level has at least this many pixels on its short side.</summary>
        public int CoarsestSide { get; init; } = 24;
        /// <summary>
        /// ε of the robust (Charbonnier) data penalty √(r² + ε²) of <see cref="SymmetricFlow"/>, in the same scaled
        /// units; residuals much larger than ε (tissue that appears or ends between the sections) pull on the field
        /// with weight ε/|r| instead of 1. 0 gives the quadratic data term of Horn–Schunck. Off by default: it filled
        /// slightly worse (docs/gap-fill.md).
        /// </summary>
        public double RobustEpsilon { get; init; }
        /// <summary>
        /// Side of the median filter applied to the field after each warp of <see cref="SymmetricFlow"/> (0 or 1: none).
        /// Off by default: it made no measurable difference and cost time (docs/gap-fill.md).
        /// </summary>
        public int MedianSide { get; init; }
        /// <summary>
        /// σ in pixels of a Gaussian applied to both planes before the field is estimated (0: none); the blend uses the
        /// unsmoothed planes. Off by default: it filled worse (docs/gap-fill.md).
        /// </summary>
        public double PreSmoothSigma { get; init; }
        /// <summary>
        /// σ in pixels of the local mean/variance normalisation of both planes before the field is estimated:
        /// (I − local mean) / √(local variance + c), Gaussian window (0: none); the blend uses the original planes. It
        /// takes out slow differences of brightness and contrast between neighbouring sections; 8 filled best of 4, 8 and
        /// 16 (docs/gap-fill.md).
        /// </summary>
        public double LocalNormalizeSigma { get; init; } = 8;
        /// <summary>
        /// Warp the neighbours for the blend with Keys cubic convolution instead of bilinear sampling. Bilinear sampling
        /// at sub-pixel positions is a low-pass filter and blurred the fill; cubic filled better on the public MRI planes,
        /// slightly worse on the demo truth volume (docs/gap-fill.md).
        /// </summary>
        public bool CubicBlend { get; init; } = true;
        /// <summary>
        /// Weight γ of a gradient-constancy term γ Σ |∇b(x + (1 − t)d) − ∇a(x − t·d)|² added to the data term (Brox,
        /// Bruhn, Papenberg &amp; Weickert 2004, ECCV; from memory), solved with the 2 × 2 system per pixel. Off by default:
        /// with the cubic blend and the local normalisation it filled worse (docs/gap-fill.md).
        /// </summary>
        public double GradientWeight { get; init; }
        /// <summary>
        /// σ (scaled units) of a per-pixel confidence 1 / (1 + r²/σ²) from the warping residual r = b(x + (1 − t)d) −
        /// a(x − t·d), Gaussian-smoothed over <see cref="ConfidenceWindow"/> px: where the warped neighbours disagree the
        /// fill moves towards the linear blend (0: off). A small gain; the fill stays on the flow where the neighbours
        /// agree (docs/gap-fill.md).
        /// </summary>
        public double ConfidenceSigma { get; init; } = 0.4;
        /// <inheritdoc cref="ConfidenceSigma"/>
        public double ConfidenceWindow { get; init; } = 2;
    }

    /// <summary>
    /// One displacement field d = (u, v) in pixels, on the grid of the plane at fraction <paramref name="t"/> between
    /// <paramref name="a"/> (t = 0) and <paramref name="b"/> (t = 1), with a(x − t·d) ≈ b(x + (1 − t)·d): the symmetric
    /// ("mid-point") form of the two-frame flow problem, so that neither neighbour is the reference and both are warped
    /// by one field. Both planes are first normalised to local mean 0 and unit local spread
    /// (<see cref="FlowOptions.LocalNormalizeSigma"/>), so that brightness and contrast differences between sections do not
    /// read as motion. Energy: Σ ψ((b(x + (1 − t)d) − a(x − t·d))²) [+ γ Σ |∇b − ∇a|², optional] + α² Σ |∇d|², with
    /// ψ(s²) = √(s² + ε²) the robust Charbonnier penalty and its minimisation by warping on a coarse-to-fine pyramid with lagged weights as in
    /// Brox, Bruhn, Papenberg &amp; Weickert 2004 (ECCV, LNCS 3024:25, "High accuracy optical flow estimation based on
    /// a theory for warping"); the quadratic smoothness term and the Jacobi-type update are those of Horn &amp;
    /// Schunck 1981 (Artif. Intell. 17:185); the median filter of the field after each warp follows Sun, Roth &amp;
    /// Black 2010 (CVPR, "Secrets of optical flow estimation and their principles"). References from memory.
    /// Interpolating a missing slice along such a field is registration-based slice interpolation (Penney, Schnabel,
    /// Rueckert et al. 2004, IEEE TMI 23:922, from memory). Returns zero flow for flat images.
    /// </summary>
    public static (float[] U, float[] V) SymmetricFlow(GrayImage a, GrayImage b, double t, FlowOptions options)
    {
        var (pyramidA, pyramidB) = Pyramids(a, b, options);
        float[] u = new float[pyramidA[^1].Pixels.Length], v = new float[u.Length];
        for (int level = pyramidA.Count - 1; level >= 0; level--)
        {
            var la = pyramidA[level];
            var lb = pyramidB[level];
            if (level < pyramidA.Count - 1)
                (u, v) = Upsample(u, v, pyramidA[level + 1].Width, pyramidA[level + 1].Height, la.Width, la.Height);
            var (ax, ay) = Gradients(la);
            var (bx, by) = Gradients(lb);
            Hessian? hessian = null;
            if (options.GradientWeight > 0)
            {
                var (axx, axy) = Gradients(ax);
                var (_, ayy) = Gradients(ay);
                var (bxx, bxy) = Gradients(bx);
                var (_, byy) = Gradients(by);
                hessian = new Hessian(axx, axy, ayy, bxx, bxy, byy);
            }
            for (int warp = 0; warp < options.WarpsPerLevel; warp++)
            {
                RefineSymmetric(la, lb, ax, ay, bx, by, hessian, t, u, v, options);
                if (options.MedianSide > 1)
                {
                    u = Median(u, la.Width, la.Height, options.MedianSide);
                    v = Median(v, la.Width, la.Height, options.MedianSide);
                }
            }
        }
        for (int i = 0; i < u.Length; i++)
            if (!float.IsFinite(u[i]) || !float.IsFinite(v[i])) { u[i] = 0; v[i] = 0; }
        return (u, v);
    }

    /// <summary>Second derivatives of both planes, for the gradient-constancy term.</summary>
    private sealed record Hessian(GrayImage Axx, GrayImage Axy, GrayImage Ayy, GrayImage Bxx, GrayImage Bxy, GrayImage Byy);

    /// <summary>One linearisation of the symmetric problem about the current field, then the iteration for the increment.</summary>
    private static void RefineSymmetric(GrayImage a, GrayImage b, GrayImage ax, GrayImage ay, GrayImage bx, GrayImage by,
        Hessian? hessian, double t, float[] u, float[] v, FlowOptions options)
    {
        int w = a.Width, h = a.Height, n = w * h;
        var gx = new float[n];
        var gy = new float[n];
        var it = new float[n];
        float ta = (float)t, tb = (float)(1 - t);
        float gamma = (float)options.GradientWeight;
        // Gradient constancy: residuals rx = bx(xb) − ax(xa), ry likewise; their derivatives in d are rows of the Hessians.
        float[] hxx = [], hxy = [], hyx = [], hyy = [], rx = [], ry = [];
        if (hessian is not null)
        {
            hxx = new float[n]; hxy = new float[n]; hyx = new float[n]; hyy = new float[n]; rx = new float[n]; ry = new float[n];
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                int i = y * w + x;
                double xa = x - t * u[i], ya = y - t * v[i], xb = x + (1 - t) * u[i], yb = y + (1 - t) * v[i];
                float bxyv = Bilinear.SampleEdgeClamped(hessian.Bxy, xb, yb), axyv = Bilinear.SampleEdgeClamped(hessian.Axy, xa, ya);
                hxx[i] = tb * Bilinear.SampleEdgeClamped(hessian.Bxx, xb, yb) + ta * Bilinear.SampleEdgeClamped(hessian.Axx, xa, ya);
                hxy[i] = tb * bxyv + ta * axyv;
                hyx[i] = hxy[i];
                hyy[i] = tb * Bilinear.SampleEdgeClamped(hessian.Byy, xb, yb) + ta * Bilinear.SampleEdgeClamped(hessian.Ayy, xa, ya);
                rx[i] = Bilinear.SampleEdgeClamped(bx, xb, yb) - Bilinear.SampleEdgeClamped(ax, xa, ya);
                ry[i] = Bilinear.SampleEdgeClamped(by, xb, yb) - Bilinear.SampleEdgeClamped(ay, xa, ya);
            }
        }
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int i = y * w + x;
            double xa = x - t * u[i], ya = y - t * v[i], xb = x + (1 - t) * u[i], yb = y + (1 - t) * v[i];
            // d/dd [b(x + (1 − t)d) − a(x − t·d)] = (1 − t)∇b + t∇a at the warped positions.
            gx[i] = tb * Bilinear.SampleEdgeClamped(bx, xb, yb) + ta * Bilinear.SampleEdgeClamped(ax, xa, ya);
            gy[i] = tb * Bilinear.SampleEdgeClamped(by, xb, yb) + ta * Bilinear.SampleEdgeClamped(ay, xa, ya);
            it[i] = Bilinear.SampleEdgeClamped(b, xb, yb) - Bilinear.SampleEdgeClamped(a, xa, ya);
        }
        var du = new float[n];
        var dv = new float[n];
        var nu = new float[n];
        var nv = new float[n];
        var weight = new float[n];
        Array.Fill(weight, 1f);
        float alpha2 = (float)(options.Alpha * options.Alpha);
        float eps = (float)options.RobustEpsilon;
        int lag = Math.Max(1, options.IterationsPerWarp / 4);
        for (int iteration = 0; iteration < options.IterationsPerWarp; iteration++)
        {
            if (eps > 0 && iteration % lag == 0)
                for (int i = 0; i < n; i++)
                {
                    float r = it[i] + gx[i] * du[i] + gy[i] * dv[i];
                    weight[i] = eps / MathF.Sqrt(r * r + eps * eps);
                }
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                int i = y * w + x;
                float mu = IncrementMean(du, u, w, h, x, y);
                float mv = IncrementMean(dv, v, w, h, x, y);
                float wi = weight[i];
                if (hessian is null)
                {
                    float k = wi * (gx[i] * mu + gy[i] * mv + it[i]) / (alpha2 + wi * (gx[i] * gx[i] + gy[i] * gy[i]));
                    nu[i] = mu - gx[i] * k;
                    nv[i] = mv - gy[i] * k;
                }
                else
                {
                    // (J + α² I) δ = α² m − c, J = w g gᵀ + γ (hx hxᵀ + hy hyᵀ), c = w g it + γ (hx rx + hy ry).
                    float j11 = wi * gx[i] * gx[i] + gamma * (hxx[i] * hxx[i] + hyx[i] * hyx[i]) + alpha2;
                    float j12 = wi * gx[i] * gy[i] + gamma * (hxx[i] * hxy[i] + hyx[i] * hyy[i]);
                    float j22 = wi * gy[i] * gy[i] + gamma * (hxy[i] * hxy[i] + hyy[i] * hyy[i]) + alpha2;
                    float c1 = wi * gx[i] * it[i] + gamma * (hxx[i] * rx[i] + hyx[i] * ry[i]);
                    float c2 = wi * gy[i] * it[i] + gamma * (hxy[i] * rx[i] + hyy[i] * ry[i]);
                    float r1 = alpha2 * mu - c1, r2 = alpha2 * mv - c2;
                    float det = j11 * j22 - j12 * j12;
                    nu[i] = (j22 * r1 - j12 * r2) / det;
                    nv[i] = (j11 * r2 - j12 * r1) / det;
                }
            }
            (du, nu) = (nu, du);
            (dv, nv) = (nv, dv);
        }
        for (int i = 0; i < n; i++) { u[i] += du[i]; v[i] += dv[i]; }
    }

    /// <summary>Central differences (one-sided at the border).</summary>
    private static (GrayImage X, GrayImage Y) Gradients(GrayImage image)
    {
        int w = image.Width, h = image.Height;
        var gx = new GrayImage(w, h);
        var gy = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int xl = Math.Max(0, x - 1), xr = Math.Min(w - 1, x + 1), yu = Math.Max(0, y - 1), yd = Math.Min(h - 1, y + 1);
            gx.Pixels[y * w + x] = (image.Pixels[y * w + xr] - image.Pixels[y * w + xl]) / Math.Max(1, xr - xl);
            gy.Pixels[y * w + x] = (image.Pixels[yd * w + x] - image.Pixels[yu * w + x]) / Math.Max(1, yd - yu);
        }
        return (gx, gy);
    }

    /// <summary>Cubic convolution (<see cref="CubicConvolution"/>) with positions outside the image moved to its nearest edge.</summary>
    private static float SampleCubic(GrayImage image, double x, double y)
    {
        int w = image.Width, h = image.Height;
        if (!double.IsFinite(x) || !double.IsFinite(y)) return image.Pixels[0];
        double fx = Math.Clamp(x, 0, w - 1), fy = Math.Clamp(y, 0, h - 1);
        int x0 = (int)Math.Floor(fx), y0 = (int)Math.Floor(fy);
        return CubicConvolution.Sample(image, x0, y0, fx - x0, fy - y0);
    }

    /// <summary>Square median filter of side <paramref name="side"/> (odd), the window cut at the border.</summary>
    private static float[] Median(float[] field, int w, int h, int side)
    {
        int r = side / 2;
        var result = new float[field.Length];
        var window = new float[side * side];
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int m = 0;
            for (int yy = Math.Max(0, y - r); yy <= Math.Min(h - 1, y + r); yy++)
            for (int xx = Math.Max(0, x - r); xx <= Math.Min(w - 1, x + r); xx++)
                window[m++] = field[yy * w + xx];
            var span = window.AsSpan(0, m);
            span.Sort();
            result[y * w + x] = (m & 1) == 1 ? span[m / 2] : 0.5f * (span[m / 2 - 1] + span[m / 2]);
        }
        return result;
    }

    /// <summary>
    /// The 4-neighbourhood mean (edges clamped) of the total field, increment <paramref name="d"/> plus current
    /// <paramref name="f"/>, minus the current field at (x, y): the increment that smoothness alone would ask for, so the
    /// smoothness term acts on the whole flow, not only on the increment.
    /// </summary>
    [System.Runtime.CompilerServices.MethodImpl(System.Runtime.CompilerServices.MethodImplOptions.AggressiveInlining)]
    private static float IncrementMean(float[] d, float[] f, int w, int h, int x, int y)
    {
        int xl = Math.Max(0, x - 1), xr = Math.Min(w - 1, x + 1), yu = Math.Max(0, y - 1), yd = Math.Min(h - 1, y + 1);
        return 0.25f * (d[y * w + xl] + d[y * w + xr] + d[yu * w + x] + d[yd * w + x]
                        + f[y * w + xl] + f[y * w + xr] + f[yu * w + x] + f[yd * w + x]) - f[y * w + x];
    }

    /// <summary>
    /// Both planes scaled by their common spread (optionally pre-smoothed), then halved until the short side would drop
    /// below <see cref="FlowOptions.CoarsestSide"/>: level 0 is full size.
    /// </summary>
    private static (List<GrayImage> A, List<GrayImage> B) Pyramids(GrayImage a, GrayImage b, FlowOptions options)
    {
        double spread = Spread(a.Pixels, b.Pixels);
        var na = Scaled(a, spread);
        var nb = Scaled(b, spread);
        if (options.LocalNormalizeSigma > 0)
        {
            na = LocallyNormalized(na, options.LocalNormalizeSigma);
            nb = LocallyNormalized(nb, options.LocalNormalizeSigma);
        }
        if (options.PreSmoothSigma > 0)
        {
            na = GaussianFilter.Blur(na, options.PreSmoothSigma);
            nb = GaussianFilter.Blur(nb, options.PreSmoothSigma);
        }
        var pyramidA = new List<GrayImage> { na };
        var pyramidB = new List<GrayImage> { nb };
        while (Math.Min(pyramidA[^1].Width, pyramidA[^1].Height) / 2 >= options.CoarsestSide)
        {
            pyramidA.Add(Half(pyramidA[^1]));
            pyramidB.Add(Half(pyramidB[^1]));
        }
        return (pyramidA, pyramidB);
    }

    /// <summary>(I − local mean) / √(local variance + c), Gaussian window of σ px; c keeps flat background near zero.</summary>
    private static GrayImage LocallyNormalized(GrayImage image, double sigma)
    {
        var mean = GaussianFilter.Blur(image, sigma);
        var sq = new GrayImage(image.Width, image.Height);
        for (int i = 0; i < sq.Pixels.Length; i++) { float d = image.Pixels[i] - mean.Pixels[i]; sq.Pixels[i] = d * d; }
        var variance = GaussianFilter.Blur(sq, sigma);
        var result = new GrayImage(image.Width, image.Height);
        // Scaled units: spread ≈ 1, so c = 0.01 puts a floor of a tenth of the spread under the local deviation (flat
        // background stays near 0). The factor sets the contrast the smoothness weight α acts against: 0.36 with α 0.5
        // (≈ 0.5 with α 0.7); with 0.25 the known-shift field of GapFillTests fell 0.6 px short. Chosen on GapFillTests
        // (2026-12-02), see FlowOptions.Alpha.
        for (int i = 0; i < sq.Pixels.Length; i++)
            result.Pixels[i] = 0.36f * (image.Pixels[i] - mean.Pixels[i]) / MathF.Sqrt(variance.Pixels[i] + 0.01f);
        return result;
    }

    private static double Spread(float[] a, float[] b)
    {
        var all = new float[a.Length + b.Length];
        a.CopyTo(all, 0);
        b.CopyTo(all, a.Length);
        Array.Sort(all);
        double spread = all[(int)(0.95 * (all.Length - 1))] - all[(int)(0.05 * (all.Length - 1))];
        return spread > 0 ? spread : 1;
    }

    private static GrayImage Scaled(GrayImage image, double spread)
    {
        var p = new float[image.Pixels.Length];
        for (int i = 0; i < p.Length; i++) p[i] = (float)(image.Pixels[i] / spread);
        return new GrayImage(image.Width, image.Height, p);
    }

    /// <summary>2 × 2 block mean (odd last row/column dropped).</summary>
    private static GrayImage Half(GrayImage image)
    {
        int w = image.Width / 2, h = image.Height / 2;
        var result = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
            result.Pixels[y * w + x] = 0.25f * (image[2 * x, 2 * y] + image[2 * x + 1, 2 * y] + image[2 * x, 2 * y + 1] + image[2 * x + 1, 2 * y + 1]);
        return result;
    }

    /// <summary>The field on the next finer level: sampled bilinearly at the matching coarse position and doubled.</summary>
    private static (float[] U, float[] V) Upsample(float[] u, float[] v, int w, int h, int fineW, int fineH)
    {
        var cu = new GrayImage(w, h, u);
        var cv = new GrayImage(w, h, v);
        var fu = new float[fineW * fineH];
        var fv = new float[fineW * fineH];
        for (int y = 0; y < fineH; y++)
        for (int x = 0; x < fineW; x++)
        {
            // A 2 × 2 block's centre: fine (2X + 0.5) is coarse X.
            double cx = Math.Clamp((x - 0.5) / 2, 0, w - 1), cy = Math.Clamp((y - 0.5) / 2, 0, h - 1);
            fu[y * fineW + x] = 2 * cu.SampleBilinear(cx, cy);
            fv[y * fineW + x] = 2 * cv.SampleBilinear(cx, cy);
        }
        return (fu, fv);
    }
}
