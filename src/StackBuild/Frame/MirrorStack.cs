using MathNet.Numerics;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Numerics;

namespace StackBuild.Frame;

/// <summary>
/// The sections of a stack reduced to one working size, background removed, edges tapered, each centred on a
/// square canvas large enough that a reflection about any line through the image centre stays on it, with their
/// spectra. <see cref="Score"/> gives the stack's mirror correlation for candidate axis directions.
/// </summary>
internal sealed class MirrorStack : IDisposable
{
    /// <summary>A reflection's translation along its own axis (a glide) is no mirror symmetry; allow this much (working px) for sampling.</summary>
    private const double MaxGlide = 1.5;

    private readonly int _n;
    private readonly IFft2D _fft;
    private readonly float[][] _canvas;
    private readonly ComplexImage[] _spectra;
    private readonly double[] _energy;
    private readonly double[] _weight;
    private readonly double _cx, _cy;
    private readonly int _ox, _oy;
    private readonly Transform2D _fullToWork;

    /// <summary>Indices (into the caller's list) of the sections held, and their weight × root energy.</summary>
    public int[] PlaneIndices { get; }
    public double[] Strength { get; }
    public int PlanesUsed => PlaneIndices.Length;

    /// <summary>The mirror correlation for one direction: <see cref="Value"/> in [−1, 1] and the shift (Dx, Dy) of the original on its reflection, in working pixels.</summary>
    public readonly record struct Score1(double Value, double Dx, double Dy);

    private MirrorStack(int n, IFft2D fft, float[][] canvas, ComplexImage[] spectra, double[] energy, double[] weight, int[] indices,
        double cx, double cy, int ox, int oy, Transform2D fullToWork)
    {
        _n = n; _fft = fft; _canvas = canvas; _spectra = spectra; _energy = energy; _weight = weight;
        PlaneIndices = indices; _cx = cx; _cy = cy; _ox = ox; _oy = oy; _fullToWork = fullToWork;
        Strength = indices.Select((_, k) => weight[k] * Math.Sqrt(energy[k])).ToArray();
    }

    public static MirrorStack Prepare(IReadOnlyList<GrayImage> planes, IReadOnlyList<double>? weights, IReadOnlyList<int> indices, int workSize,
        double highPass = 0)
    {
        int width = planes[0].Width, height = planes[0].Height;
        var (scale, fullToWork) = Preprocessing.WorkScale(width, height, Math.Max(8, workSize));
        int w = Math.Max(1, (int)Math.Round(width * scale)), h = Math.Max(1, (int)Math.Round(height * scale));
        int n = Fft2D.PaddedSize((int)Math.Ceiling(Math.Sqrt((double)w * w + (double)h * h)) + 4);
        int ox = (n - w) / 2, oy = (n - h) / 2;
        // Taper the outer 8 % of each side to zero, so tissue cut by the image edge does not end in a hard step.
        var taper = PhaseCorrelation.SeparableWindow(ApodisationWindow.Tukey, 0.16, w, h);

        var canvas = new float[indices.Count][];
        var energy = new double[indices.Count];
        Parallel.For(0, indices.Count, k =>
        {
            var source = planes[indices[k]];
            var clean = source.Pixels.Any(v => !float.IsFinite(v))
                ? new GrayImage(source.Width, source.Height, source.Pixels.Select(v => float.IsFinite(v) ? v : 0f).ToArray())
                : source;
            var small = Preprocessing.Reduce(clean, scale);
            if (small.Width != w || small.Height != h) small = Resampler.Warp(small, Transform2D.Identity, w, h, 0f);
            float background = small.BorderMedian(Math.Max(1, (int)(0.02 * Math.Min(w, h))));
            if (highPass > 0)
            {
                var low = GaussianFilter.BlurSingle(small.Pixels, w, h, highPass * Math.Max(w, h));
                var p = small.Pixels;
                small = new GrayImage(w, h, p.Select((v, i) => v - low[i] + background).ToArray());
            }
            var c = new float[n * n];
            double e = 0;
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                float v = (small[x, y] - background) * taper[y * w + x];
                c[(y + oy) * n + x + ox] = v;
                e += (double)v * v;
            }
            canvas[k] = c;
            energy[k] = e;
        });

        // Sections without tissue (empty, flat) and those weighted zero take no part.
        double maxEnergy = energy.DefaultIfEmpty(0).Max();
        var keep = Enumerable.Range(0, indices.Count)
            .Where(k => energy[k] > 1e-9 * maxEnergy && energy[k] > 0 && (weights == null || weights[indices[k]] > 0)).ToArray();
        var fft = Fft2D.Create(n, n);
        var spectra = new ComplexImage[keep.Length];
        Parallel.For(0, keep.Length, j =>
        {
            var s = new ComplexImage(n, n);
            s.SetReal(canvas[keep[j]]);
            fft.Forward(s);
            spectra[j] = s;
        });
        return new MirrorStack(n, fft, keep.Select(k => canvas[k]).ToArray(), spectra, keep.Select(k => energy[k]).ToArray(),
            keep.Select(k => weights == null ? 1.0 : weights[indices[k]]).ToArray(), keep.Select(k => indices[k]).ToArray(),
            ox + (w - 1) / 2.0, oy + (h - 1) / 2.0, ox, oy, fullToWork);
    }

    /// <summary>
    /// For each axis direction (degrees from +x towards +y), the stack's correlation with its reflection about a
    /// line of that direction through the image centre, at the best shift across the line:
    /// Σ wᵢ·(Iᵢ ⋆ Jᵢ)(t) / Σ wᵢ·‖Iᵢ‖‖Jᵢ‖, which lies in [−1, 1] (Cauchy–Schwarz).
    /// </summary>
    public Score1[] Score(IReadOnlyList<double> anglesDegrees)
    {
        var result = new Score1[anglesDegrees.Count];
        Parallel.For(0, anglesDegrees.Count, a => result[a] = ScoreOne(anglesDegrees[a]));
        return result;
    }

    private Score1 ScoreOne(double thetaDegrees)
    {
        int n = _n;
        if (_spectra.Length == 0) return new Score1(0, 0, 0);
        double t = thetaDegrees * Math.PI / 180, c2 = Math.Cos(2 * t), s2 = Math.Sin(2 * t);
        // Reflection about the line through (cx, cy) with direction (cos θ, sin θ): p' = c + M(p − c); it is its own inverse.
        var reflect = new Transform2D(c2, s2, _cx - c2 * _cx - s2 * _cy, s2, -c2, _cy - s2 * _cx + c2 * _cy);
        var mirrored = new float[n * n];
        using var scratch = new ComplexImage(n, n);
        using var sum = new ComplexImage(n, n);
        var acc = sum.Span;
        double denominator = 0;
        for (int k = 0; k < _spectra.Length; k++)
        {
            ImageOps.Warp(_canvas[k], n, reflect, mirrored);
            double e = 0;
            foreach (var v in mirrored) e += (double)v * v;
            if (e <= 0) continue;
            scratch.SetReal(mirrored);
            _fft.Forward(scratch);
            var f = _spectra[k].Span;
            var m = scratch.Span;
            float w = (float)_weight[k];
            for (int i = 0; i < acc.Length; i++) acc[i] += w * f[i] * m[i].Conjugate();
            denominator += _weight[k] * Math.Sqrt(_energy[k] * e);
        }
        if (!(denominator > 0)) return new Score1(0, 0, 0);
        _fft.Inverse(sum);
        var surface = sum.Span;
        // The inverse transform (scaled by 1/n²) of F·conj(G) is the circular correlation Σₓ f(x)·g(x − t) itself.
        double norm = 1 / denominator;

        double ux = Math.Cos(t), uy = Math.Sin(t);
        int bx = 0, by = 0;
        double best = double.NegativeInfinity;
        for (int y = 0; y < n; y++)
        {
            int sy = y > n / 2 ? y - n : y;
            for (int x = 0; x < n; x++)
            {
                int sx = x > n / 2 ? x - n : x;
                if (Math.Abs(sx * ux + sy * uy) > MaxGlide) continue;
                double v = surface[y * n + x].Real;
                if (v > best) { best = v; bx = x; by = y; }
            }
        }
        double l = At(surface, n, bx - 1, by), r = At(surface, n, bx + 1, by), u = At(surface, n, bx, by - 1), d = At(surface, n, bx, by + 1);
        double fx = Midline.ParabolaVertex(l, best, r), fy = Midline.ParabolaVertex(u, best, d);
        double height = best + Lift(l, best, r) + Lift(u, best, d);
        double dx = (bx > n / 2 ? bx - n : bx) + fx, dy = (by > n / 2 ? by - n : by) + fy;
        return new Score1(Math.Clamp(height * norm, -1, 1), dx, dy);
    }

    private static double At(Span<Complex32> surface, int n, int x, int y) => surface[((y % n + n) % n) * n + (x % n + n) % n].Real;

    /// <summary>How far the parabola through (−1, a), (0, b), (1, c) rises above b at its vertex (0 without a maximum).</summary>
    private static double Lift(double a, double b, double c)
    {
        double curvature = a - 2 * b + c;
        return curvature < 0 ? Math.Min(Math.Abs(b), -(a - c) * (a - c) / (8 * curvature)) : 0;
    }

    /// <summary>The full-resolution pixel position of the image centre moved by (dx, dy) working pixels.</summary>
    public (double X, double Y) CentreToFull(double dx, double dy)
    {
        double wx = _cx + dx - _ox, wy = _cy + dy - _oy;
        return _fullToWork.Inverse().Apply(wx, wy);
    }

    public void Dispose()
    {
        foreach (var s in _spectra) s.Dispose();
    }
}
