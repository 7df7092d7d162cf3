using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Numerics;

namespace StackBuild.Register;

/// <summary>
/// The per-pair working state: one FFT size, scratch buffers, and the scoring of a hypothesis (mirror, angle)
/// on the canvases. Not thread-safe; one per pair.
/// </summary>
internal sealed class PairEngine : IDisposable
{
    /// <summary>A scored hypothesis; <see cref="CanvasMap"/> maps moving canvas to fixed canvas coordinates.</summary>
    public sealed record Evaluation(bool Mirrored, double Degrees, Transform2D CanvasMap, ShiftEstimate Shift, double Ncc);

    private readonly SectionCanvas _fixed;
    private readonly SectionCanvas _moving;
    private readonly int _n;
    private readonly IFft2D _fft;
    private readonly ComplexImage _fixedSpectrum, _movingSpectrum, _cross, _surface;
    private readonly float[] _warped;
    private readonly float[]? _spectralWeight;

    public PairEngine(SectionCanvas fixedCanvas, SectionCanvas movingCanvas, double lowPass)
    {
        _fixed = fixedCanvas;
        _moving = movingCanvas;
        _n = fixedCanvas.Size;
        _fft = Fft2D.Create(_n, _n);
        _fixedSpectrum = new ComplexImage(_n, _n);
        fixedCanvas.Spectrum.CopyTo(_fixedSpectrum.Span);
        _movingSpectrum = new ComplexImage(_n, _n);
        _cross = new ComplexImage(_n, _n);
        _surface = new ComplexImage(_n, _n);
        _warped = TakeWarpBuffer(_n);
        _spectralWeight = lowPass > 0 ? Weights.GetOrAdd((_n, lowPass), k => PhaseCorrelation.GaussianSpectralWeight(k.Item1, k.Item1, k.Item2)) : null;
    }

    /// <summary>The spectral weights, one per canvas size and low-pass (read only, shared by every engine).</summary>
    private static readonly System.Collections.Concurrent.ConcurrentDictionary<(int, double), float[]> Weights = new();

    // Each thread keeps the warp buffers of its last engines for the next pair: a pair's buffers are several megabytes, and
    // allocating them anew for each of hundreds of pairs only grows the large-object heap between collections.
    [ThreadStatic] private static List<float[]>? _spareWarpBuffers;

    private static float[] TakeWarpBuffer(int n)
    {
        var spare = _spareWarpBuffers;
        int i = spare?.FindIndex(b => b.Length == n * n) ?? -1;
        if (i < 0) return new float[n * n];
        var buffer = spare![i];
        spare.RemoveAt(i);
        return buffer;
    }

    /// <summary>
    /// Turns the moving canvas (mirrored first when asked) by <paramref name="degrees"/> about the canvas
    /// centre, finds the translation by phase correlation and scores the result by NCC.
    /// </summary>
    public Evaluation Evaluate(bool mirrored, double degrees, double upsample)
    {
        double c = _fixed.Centre;
        var turn = (mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, c, c));
        ImageOps.Warp(_moving.Signal, _n, turn, _warped, _moving.SignalBox);
        SectionCanvas.LoadWindowed(_warped, _fixed.Window, _movingSpectrum);
        _fft.Forward(_movingSpectrum);
        var shift = PhaseCorrelation.Correlate(_fixedSpectrum, _movingSpectrum, _fft, _cross, _surface, upsample, _spectralWeight);
        var map = turn.Then(Transform2D.Translation(shift.Dx, shift.Dy));
        return new Evaluation(mirrored, Normalise(degrees), map, shift, Ncc(map));
    }

    /// <summary>
    /// Local search of NCC over angle, the translation re-estimated at each angle: three angles ±<paramref name="step"/>°
    /// about the hypothesis (moved along while the best is at an end), a parabola through them, then again with
    /// a step five times smaller about its vertex until the step is below <paramref name="tolerance"/>°.
    /// Successive parabolic interpolation (common practice; the smooth half of Brent's method, Brent 1973,
    /// Algorithms for Minimization without Derivatives, ch. 5). Returns the best angle evaluated.
    /// </summary>
    public Evaluation Refine(Evaluation start, double step, double tolerance, double upsample)
    {
        var best = Evaluate(start.Mirrored, start.Degrees, upsample);
        double centre = start.Degrees;
        var c = best;
        for (int round = 0; ; round++)
        {
            var lower = Evaluate(start.Mirrored, centre - step, upsample);
            var upper = Evaluate(start.Mirrored, centre + step, upsample);
            for (int walk = 0; round == 0 && walk < 4 && Math.Max(lower.Ncc, upper.Ncc) > c.Ncc; walk++)
            {
                // The peak lies outside the three angles: move them one step towards it.
                if (upper.Ncc > lower.Ncc) { (lower, c) = (c, upper); centre += step; upper = Evaluate(start.Mirrored, centre + step, upsample); }
                else { (upper, c) = (c, lower); centre -= step; lower = Evaluate(start.Mirrored, centre - step, upsample); }
            }
            foreach (var e in (ReadOnlySpan<Evaluation>)[lower, upper, c]) if (e.Ncc > best.Ncc) best = e;
            double curvature = lower.Ncc - 2 * c.Ncc + upper.Ncc;
            double offset = curvature < 0 ? Math.Clamp(0.5 * (lower.Ncc - upper.Ncc) / curvature, -1, 1) * step : 0;
            centre += offset;
            c = Evaluate(start.Mirrored, centre, upsample);
            if (c.Ncc > best.Ncc) best = c;
            step /= 5;
            if (step < tolerance || round == 3) return best;
        }
    }

    /// <summary>Bound on the NCC evaluations of one <see cref="Polish"/>: a guard against a long walk, not a target (the demo builds the same with and without it).</summary>
    public const int MaxPolishEvaluations = 600;

    /// <summary>
    /// Polishes a hypothesis by maximising its NCC directly over angle and translation together, starting where phase
    /// correlation and the angle search left it. Phase correlation's translation is the peak of the whitened cross-power,
    /// which for two sections of different size and shape (far apart in the stack, or the fast-changing ends of a
    /// specimen) lies a few pixels from the position that best overlays their content; the mirror decision compares the
    /// NCC of both mirrors, so each must be at its own best. Compass (pattern) search: steps of ±1 px in x and y and the
    /// angle that moves the tissue's edge by one pixel, halved whenever none improves, down to 1/32 px (Kolda, Lewis &amp;
    /// Torczon 2003, SIAM Review 45:385, §3).
    /// </summary>
    public Evaluation Polish(Evaluation start) => Polish(start, 1, 1.0 / 32);

    /// <summary>
    /// <see cref="Polish(Evaluation)"/> with the compass starting at <paramref name="startStep"/> pixels (and the angle step
    /// that moves the tissue's edge as far) and stopping below <paramref name="minStep"/>.
    /// </summary>
    public Evaluation Polish(Evaluation start, double startStep, double minStep)
    {
        double c = _fixed.Centre;
        var mirror = start.Mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity;
        Transform2D Map(double degrees, double dx, double dy) =>
            mirror.Then(Transform2D.Rotation(degrees, c, c)).Then(Transform2D.Translation(dx, dy));
        // The translation that, after this angle's turn about the centre, gives the start's map.
        var turned = mirror.Then(Transform2D.Rotation(start.Degrees, c, c));
        double x = start.Degrees, dx0 = start.CanvasMap.M02 - turned.M02, dy0 = start.CanvasMap.M12 - turned.M12;
        double[] p = [x, dx0, dy0];
        double best = Ncc(Map(p[0], p[1], p[2]));
        double radius = Math.Max(4, Math.Max(_fixed.TissueRadius, _moving.TissueRadius));
        double step = startStep, angleStep = startStep * 180 / Math.PI / radius;
        // At most MaxPolishEvaluations NCC evaluations: each move must raise the NCC, but a long walk on a nearly flat slope
        // is cut off rather than left to run.
        for (int evaluations = 0; step >= minStep && evaluations < MaxPolishEvaluations; evaluations += 6)
        {
            bool moved = false;
            for (int axis = 0; axis < 3; axis++)
            for (int sign = -1; sign <= 1; sign += 2)
            {
                double kept = p[axis];
                p[axis] = kept + sign * (axis == 0 ? angleStep : step);
                double v = Ncc(Map(p[0], p[1], p[2]));
                if (v > best) { best = v; moved = true; }
                else p[axis] = kept;
            }
            if (!moved) { step /= 2; angleStep /= 2; }
        }
        if (best <= start.Ncc) return start;
        return start with { Degrees = Normalise(p[0]), CanvasMap = Map(p[0], p[1], p[2]), Ncc = best };
    }

    /// <summary>
    /// An evaluation made on the <see cref="SectionCanvas.Half"/> canvases of this engine's two, brought to this engine's
    /// canvases: the same angle, the map conjugated by <see cref="SectionCanvas.ToHalf"/> (its translation doubled), its NCC
    /// measured here; the phase correlation's shift (and with it the peak-to-sidelobe ratio) is kept from
    /// <paramref name="shiftHere"/> when given, else from the half.
    /// </summary>
    public Evaluation FromHalf(Evaluation half, ShiftEstimate? shiftHere = null)
    {
        var map = SectionCanvas.ToHalf.Then(half.CanvasMap).Then(SectionCanvas.ToHalf.Inverse());
        return half with { CanvasMap = map, Shift = shiftHere ?? half.Shift, Ncc = Ncc(map) };
    }

    /// <summary>
    /// NCC of fixed and moving-laid-on-fixed over the union of their tissue masks (feathered mask above 0.5), the moving
    /// canvas sampled bilinearly; only the bounding box where either mask can be is visited.
    /// </summary>
    internal double Ncc(Transform2D map)
    {
        var inv = map.Inverse();
        var (fx0, fy0, fx1, fy1) = _fixed.MaskBox;
        var (mx0, my0, mx1, my1) = _moving.MaskBox;
        // The moving box's corners laid on the fixed canvas, widened by two pixels for the bilinear reach.
        double bx0 = double.MaxValue, by0 = double.MaxValue, bx1 = double.MinValue, by1 = double.MinValue;
        foreach (var (px, py) in (ReadOnlySpan<(double, double)>)[(mx0, my0), (mx1, my0), (mx0, my1), (mx1, my1)])
        {
            var (qx, qy) = map.Apply(px, py);
            bx0 = Math.Min(bx0, qx); by0 = Math.Min(by0, qy); bx1 = Math.Max(bx1, qx); by1 = Math.Max(by1, qy);
        }
        int x0 = Math.Max(0, Math.Min(fx0, (int)Math.Floor(bx0) - 2)), y0 = Math.Max(0, Math.Min(fy0, (int)Math.Floor(by0) - 2));
        int x1 = Math.Min(_n - 1, Math.Max(fx1, (int)Math.Ceiling(bx1) + 2)), y1 = Math.Min(_n - 1, Math.Max(fy1, (int)Math.Ceiling(by1) + 2));
        var f = _fixed.Image;
        var fm = _fixed.SoftMask;
        var mi = _moving.Image;
        var mm = _moving.SoftMask;
        double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
        long count = 0;
        for (int y = y0; y <= y1; y++)
        {
            double sx = inv.M00 * x0 + inv.M01 * y + inv.M02, sy = inv.M10 * x0 + inv.M11 * y + inv.M12;
            for (int xx = x0; xx <= x1; xx++, sx += inv.M00, sy += inv.M10)
            {
                float wv = 0, wm = 0, tx = 0, ty = 0;
                int ix = 0, iy = 0;
                bool onCanvas = sx > -1 && sy > -1 && sx < _n && sy < _n;
                if (onCanvas)
                {
                    ix = (int)Math.Floor(sx); iy = (int)Math.Floor(sy);
                    tx = (float)(sx - ix); ty = (float)(sy - iy);
                    wm = Bilinear.CanvasFast(mm, _n, ix, iy, tx, ty);
                }
                int i = y * _n + xx;
                if (fm[i] <= 0.5f && wm <= 0.5f) continue; // outside both masks: the moving image is not needed here
                if (onCanvas) wv = Bilinear.CanvasFast(mi, _n, ix, iy, tx, ty);
                double a = f[i], b = wv;
                sa += a; sb += b; saa += a * a; sbb += b * b; sab += a * b;
                count++;
            }
        }
        if (count < 16) return 0;
        double cov = sab - sa * sb / count, va = saa - sa * sa / count, vb = sbb - sb * sb / count;
        return va > 0 && vb > 0 ? cov / Math.Sqrt(va * vb) : 0;
    }

    private static double Normalise(double degrees) => ((degrees % 360) + 360) % 360;

    public void Dispose()
    {
        // ImageOps.Warp writes every pixel of the warp buffer before it is read, so it can serve the next pair as it is.
        var spare = _spareWarpBuffers ??= [];
        if (spare.Count < 4) spare.Add(_warped);
        _fixedSpectrum.Dispose();
        _movingSpectrum.Dispose();
        _cross.Dispose();
        _surface.Dispose();
    }
}
