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
    /// planes of <paramref name="width"/> × <paramref name="height"/> voxels. <see cref="GapFill.Flow"/> computes the
    /// displacement field u from below to above (below(x) ≈ above(x + u)) by <see cref="HornSchunck"/> and blends
    /// below(x − t·u) and above(x + (1 − t)·u), so structure that moves between the sections moves part of the way
    /// instead of showing twice; <see cref="GapFill.Linear"/> blends (1 − t)·below + t·above.
    /// </summary>
    public static float[] Interpolate(ReadOnlySpan<float> below, ReadOnlySpan<float> above, int width, int height, double t, GapFill method)
    {
        var a = new GrayImage(width, height, below.ToArray());
        var b = new GrayImage(width, height, above.ToArray());
        var result = new float[width * height];
        float wa = (float)(1 - t), wb = (float)t;
        if (method != GapFill.Flow)
        {
            for (int i = 0; i < result.Length; i++) result[i] = wa * a.Pixels[i] + wb * b.Pixels[i];
            return result;
        }
        var (u, v) = HornSchunck(a, b, new FlowOptions());
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            int i = y * width + x;
            float fromA = a.SampleBilinear(x - t * u[i], y - t * v[i], a.Pixels[i]);
            float fromB = b.SampleBilinear(x + (1 - t) * u[i], y + (1 - t) * v[i], b.Pixels[i]);
            result[i] = wa * fromA + wb * fromB;
        }
        return result;
    }

    public sealed record FlowOptions
    {
        /// <summary>
        /// Smoothness weight α of Horn–Schunck, for intensities scaled to unit robust spread (p95 − p5). Set on the
        /// demo phantom's aligned planes: smaller values (0.1, 0.03) fitted texture noise and filled worse than blending.
        /// </summary>
        public double Alpha { get; init; } = 0.5;
        public int IterationsPerWarp { get; init; } = 40;
        public int WarpsPerLevel { get; init; } = 2;
        /// <summary>The coarsest pyramid level has at least this many pixels on its short side.</summary>
        public int CoarsestSide { get; init; } = 24;
    }

    /// <summary>
    /// Dense displacement field (u, v) in pixels with a(x, y) ≈ b(x + u, y + v), by the Horn–Schunck method
    /// (Horn &amp; Schunck 1981, Artif. Intell. 17:185: brightness constancy plus a quadratic smoothness term, solved by
    /// their Jacobi-type iteration), on a coarse-to-fine pyramid of 2× reductions with b warped by the current field
    /// at each level so that displacements larger than a pixel are found. Intensities are scaled by the pair's
    /// common spread first, so α does not depend on the units. Returns zero flow for flat images.
    /// </summary>
    public static (float[] U, float[] V) HornSchunck(GrayImage a, GrayImage b, FlowOptions options)
    {
        double spread = Spread(a.Pixels, b.Pixels);
        var na = Scaled(a, spread);
        var nb = Scaled(b, spread);
        var pyramidA = new List<GrayImage> { na };
        var pyramidB = new List<GrayImage> { nb };
        while (Math.Min(pyramidA[^1].Width, pyramidA[^1].Height) / 2 >= options.CoarsestSide)
        {
            pyramidA.Add(Half(pyramidA[^1]));
            pyramidB.Add(Half(pyramidB[^1]));
        }
        float[] u = new float[pyramidA[^1].Pixels.Length], v = new float[u.Length];
        for (int level = pyramidA.Count - 1; level >= 0; level--)
        {
            var la = pyramidA[level];
            var lb = pyramidB[level];
            if (level < pyramidA.Count - 1)
                (u, v) = Upsample(u, v, pyramidA[level + 1].Width, pyramidA[level + 1].Height, la.Width, la.Height);
            for (int warp = 0; warp < options.WarpsPerLevel; warp++)
                Refine(la, lb, u, v, options);
        }
        return (u, v);
    }

    /// <summary>One linearisation: b warped by (u, v), then the Horn–Schunck iteration for the increment.</summary>
    private static void Refine(GrayImage a, GrayImage b, float[] u, float[] v, FlowOptions options)
    {
        int w = a.Width, h = a.Height, n = w * h;
        var warped = new float[n];
        var ix = new float[n];
        var iy = new float[n];
        var it = new float[n];
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int i = y * w + x;
            warped[i] = b.SampleBilinear(x + u[i], y + v[i], a.Pixels[i]);
        }
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int i = y * w + x;
            int xl = Math.Max(0, x - 1), xr = Math.Min(w - 1, x + 1), yu = Math.Max(0, y - 1), yd = Math.Min(h - 1, y + 1);
            // Gradients averaged over both images (the usual symmetric estimate).
            ix[i] = 0.25f * (a.Pixels[y * w + xr] - a.Pixels[y * w + xl] + warped[y * w + xr] - warped[y * w + xl]) / Math.Max(1, xr - xl) * 2;
            iy[i] = 0.25f * (a.Pixels[yd * w + x] - a.Pixels[yu * w + x] + warped[yd * w + x] - warped[yu * w + x]) / Math.Max(1, yd - yu) * 2;
            it[i] = warped[i] - a.Pixels[i];
        }
        var du = new float[n];
        var dv = new float[n];
        var nu = new float[n];
        var nv = new float[n];
        float alpha2 = (float)(options.Alpha * options.Alpha);
        for (int iteration = 0; iteration < options.IterationsPerWarp; iteration++)
        {
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                int i = y * w + x;
                int xl = Math.Max(0, x - 1), xr = Math.Min(w - 1, x + 1), yu = Math.Max(0, y - 1), yd = Math.Min(h - 1, y + 1);
                // The neighbourhood mean of the total field (increment + current), so smoothness acts on the whole flow.
                float mu = 0.25f * (du[y * w + xl] + du[y * w + xr] + du[yu * w + x] + du[yd * w + x]
                                    + u[y * w + xl] + u[y * w + xr] + u[yu * w + x] + u[yd * w + x]) - u[i];
                float mv = 0.25f * (dv[y * w + xl] + dv[y * w + xr] + dv[yu * w + x] + dv[yd * w + x]
                                    + v[y * w + xl] + v[y * w + xr] + v[yu * w + x] + v[yd * w + x]) - v[i];
                float k = (ix[i] * mu + iy[i] * mv + it[i]) / (alpha2 + ix[i] * ix[i] + iy[i] * iy[i]);
                nu[i] = mu - ix[i] * k;
                nv[i] = mv - iy[i] * k;
            }
            (du, nu) = (nu, du);
            (dv, nv) = (nv, dv);
        }
        for (int i = 0; i < n; i++) { u[i] += du[i]; v[i] += dv[i]; }
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
