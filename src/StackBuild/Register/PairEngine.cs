using System.Numerics;
using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using System.Runtime.Intrinsics.X86;
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
    /// <summary>
    /// The moving canvas's image and soft mask at each pixel and its right neighbour, four floats a pixel (image, image right,
    /// mask, mask right; the last column's right neighbours are 0), so <see cref="NccVector"/> reads a sample's two upper or
    /// two lower corners of both with one load; null without AVX (then the scalar NCC needs no packing).
    /// </summary>
    private readonly float[]? _corners;
    private readonly float[]? _spectralWeight;

    public PairEngine(SectionCanvas fixedCanvas, SectionCanvas movingCanvas, double lowPass)
    {
        _fixed = fixedCanvas;
        _moving = movingCanvas;
        _n = fixedCanvas.Size;
        _fft = Fft2D.Create(_n, _n);
        // Rented: the fixed spectrum is copied whole, the moving one loaded whole before each transform, and the cross-power
        // writes both of the others whole (PhaseCorrelation.Correlate), so what a rented image held never shows.
        _fixedSpectrum = ComplexImagePool.Rent(_n, _n);
        fixedCanvas.Spectrum.CopyTo(_fixedSpectrum.Span);
        _movingSpectrum = ComplexImagePool.Rent(_n, _n);
        _cross = ComplexImagePool.Rent(_n, _n);
        _surface = ComplexImagePool.Rent(_n, _n);
        _warped = TakeWarpBuffer(_n);
        if (Avx.IsSupported) _corners = PackCorners(movingCanvas, TakeBuffer(4 * _n * _n));
        _spectralWeight = lowPass > 0 ? Weights.GetOrAdd((_n, lowPass), k => PhaseCorrelation.GaussianSpectralWeight(k.Item1, k.Item1, k.Item2)) : null;
    }

    /// <summary>The spectral weights, one per canvas size and low-pass (read only, shared by every engine).</summary>
    private static readonly System.Collections.Concurrent.ConcurrentDictionary<(int, double), float[]> Weights = new();

    // Each thread keeps the warp buffers of its last engines for the next pair: a pair's buffers are several megabytes, and
    // allocating them anew for each of hundreds of pairs only grows the large-object heap between collections.
    [ThreadStatic] private static List<float[]>? _spareWarpBuffers;

    private static float[] TakeWarpBuffer(int n) => TakeBuffer(n * n);

    private static float[] TakeBuffer(int length)
    {
        var spare = _spareWarpBuffers;
        int i = spare?.FindIndex(b => b.Length == length) ?? -1;
        if (i < 0) return new float[length];
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
    /// canvas sampled bilinearly; only the bounding box where either mask can be is visited. Four pixels at a time where the
    /// processor has AVX (<see cref="NccVector"/>), else one at a time (<see cref="NccScalar"/>); the two sample the same
    /// positions to within rounding and differ only in the order of the sums (about 1e-15 of the NCC).
    /// </summary>
    internal double Ncc(Transform2D map) => _corners is not null ? NccVector(map) : NccScalar(map);

    /// <summary>The pixel box of the fixed canvas that <see cref="Ncc"/> visits for <paramref name="map"/>.</summary>
    private (int X0, int Y0, int X1, int Y1) NccBox(Transform2D map)
    {
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
        return (x0, y0, x1, y1);
    }

    /// <summary>Running sums of the NCC: Σa, Σb, Σa², Σb², Σab and the count.</summary>
    private struct NccSums
    {
        public double A, B, AA, BB, AB;
        public long Count;

        public void Add(double a, double b) { A += a; B += b; AA += a * a; BB += b * b; AB += a * b; Count++; }

        public readonly double Value()
        {
            if (Count < 16) return 0;
            double cov = AB - A * B / Count, va = AA - A * A / Count, vb = BB - B * B / Count;
            return va > 0 && vb > 0 ? cov / Math.Sqrt(va * vb) : 0;
        }
    }

    /// <summary>One pixel of the NCC: fixed pixel <paramref name="i"/> against the moving canvas sampled at (sx, sy).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void NccPixel(ref NccSums sums, int i, double sx, double sy)
    {
        float wv = 0, wm = 0, tx = 0, ty = 0;
        int ix = 0, iy = 0;
        bool onCanvas = sx > -1 && sy > -1 && sx < _n && sy < _n;
        if (onCanvas)
        {
            ix = (int)Math.Floor(sx); iy = (int)Math.Floor(sy);
            tx = (float)(sx - ix); ty = (float)(sy - iy);
            wm = Bilinear.CanvasFast(_moving.SoftMask, _n, ix, iy, tx, ty);
        }
        if (_fixed.SoftMask[i] <= 0.5f && wm <= 0.5f) return; // outside both masks: the moving image is not needed here
        if (onCanvas) wv = Bilinear.CanvasFast(_moving.Image, _n, ix, iy, tx, ty);
        sums.Add(_fixed.Image[i], wv);
    }

    /// <summary><see cref="Ncc"/> one pixel at a time, the sample positions stepped along each row.</summary>
    internal double NccScalar(Transform2D map)
    {
        var inv = map.Inverse();
        var (x0, y0, x1, y1) = NccBox(map);
        var sums = new NccSums();
        for (int y = y0; y <= y1; y++)
        {
            double sx = inv.M00 * x0 + inv.M01 * y + inv.M02, sy = inv.M10 * x0 + inv.M11 * y + inv.M12;
            for (int xx = x0; xx <= x1; xx++, sx += inv.M00, sy += inv.M10)
                NccPixel(ref sums, y * _n + xx, sx, sy);
        }
        return sums.Value();
    }

    /// <summary>
    /// <see cref="Ncc"/> four pixels at a time (AVX): sample positions, bilinear weights and the corners of each sample
    /// (<see cref="BilinearBoth"/>) as vectors, the sums kept per lane. A group of four that straddles the canvas's edge (some samples inside,
    /// some outside or on the last row or column) is done one pixel at a time as <see cref="NccScalar"/> does.
    /// </summary>
    internal unsafe double NccVector(Transform2D map)
    {
        var inv = map.Inverse();
        var (x0, y0, x1, y1) = NccBox(map);
        int n = _n;
        var sums = new NccSums();
        var sa = Vector256<double>.Zero; var sb = sa; var saa = sa; var sbb = sa; var sab = sa;
        long count = 0;
        var lane = Vector256.Create(0.0, 1, 2, 3);
        var half = Vector128.Create(0.5f);
        var one = Vector128.Create(1f);
        var lowEdge = Vector256.Create(-1.0);
        var highEdge = Vector256.Create((double)n);
        var last = Vector128.Create(n - 1);
        var m00 = Vector256.Create(inv.M00);
        var m10 = Vector256.Create(inv.M10);
        var stride = Vector128.Create(n);
        fixed (float* f = _fixed.Image, fm = _fixed.SoftMask, corners = _corners)
        {
            for (int y = y0; y <= y1; y++)
            {
                double rowX = inv.M01 * y + inv.M02, rowY = inv.M11 * y + inv.M12;
                int xx = x0;
                for (; xx + 3 <= x1; xx += 4)
                {
                    var px = Vector256.Create((double)xx) + lane;
                    var sx = m00 * px + Vector256.Create(rowX);
                    var sy = m10 * px + Vector256.Create(rowY);
                    int i = y * n + xx;
                    var on = Vector256.GreaterThan(sx, lowEdge) & Vector256.GreaterThan(sy, lowEdge)
                        & Vector256.LessThan(sx, highEdge) & Vector256.LessThan(sy, highEdge);
                    uint onBits = on.ExtractMostSignificantBits();
                    Vector128<float> a, b;
                    if (onBits == 0)
                    {
                        // Every sample off the moving canvas: only the fixed mask's pixels count, against 0.
                        var keepOff = Vector128.GreaterThan(Vector128.Load(fm + i), half);
                        uint bits = keepOff.ExtractMostSignificantBits();
                        if (bits == 0) continue;
                        a = Vector128.ConditionalSelect(keepOff, Vector128.Load(f + i), Vector128<float>.Zero);
                        b = Vector128<float>.Zero;
                        count += BitOperations.PopCount(bits);
                    }
                    else
                    {
                        var fx = Vector256.Floor(sx);
                        var fy = Vector256.Floor(sy);
                        var ix = Avx.ConvertToVector128Int32WithTruncation(fx);
                        var iy = Avx.ConvertToVector128Int32WithTruncation(fy);
                        bool inside = onBits == 0xF && (Vector128.GreaterThanOrEqual(ix, Vector128<int>.Zero) & Vector128.LessThan(ix, last)
                            & Vector128.GreaterThanOrEqual(iy, Vector128<int>.Zero) & Vector128.LessThan(iy, last)).ExtractMostSignificantBits() == 0xF;
                        if (!inside)
                        {
                            // On the canvas's edge: one pixel at a time, each sample position as the vector computed it.
                            for (int k = 0; k < 4; k++) NccPixel(ref sums, i + k, sx.GetElement(k), sy.GetElement(k));
                            continue;
                        }
                        var tx = Avx.ConvertToVector128Single(sx - fx);
                        var ty = Avx.ConvertToVector128Single(sy - fy);
                        var index = iy * stride + ix;
                        var (wv, wm) = BilinearBoth(corners, index, n, tx, ty, one);
                        var keep = Vector128.GreaterThan(Vector128.Load(fm + i), half) | Vector128.GreaterThan(wm, half);
                        uint bits = keep.ExtractMostSignificantBits();
                        if (bits == 0) continue;
                        a = Vector128.ConditionalSelect(keep, Vector128.Load(f + i), Vector128<float>.Zero);
                        b = Vector128.ConditionalSelect(keep, wv, Vector128<float>.Zero);
                        count += BitOperations.PopCount(bits);
                    }
                    var ad = Avx.ConvertToVector256Double(a);
                    var bd = Avx.ConvertToVector256Double(b);
                    sa += ad; sb += bd; saa += ad * ad; sbb += bd * bd; sab += ad * bd;
                }
                for (; xx <= x1; xx++)
                    NccPixel(ref sums, y * n + xx, inv.M00 * xx + rowX, inv.M10 * xx + rowY);
            }
        }
        sums.A += Vector256.Sum(sa); sums.B += Vector256.Sum(sb);
        sums.AA += Vector256.Sum(saa); sums.BB += Vector256.Sum(sbb); sums.AB += Vector256.Sum(sab);
        sums.Count += count;
        return sums.Value();
    }

    /// <summary>Fills <paramref name="corners"/> as <see cref="_corners"/> describes, from <paramref name="canvas"/>.</summary>
    private static float[] PackCorners(SectionCanvas canvas, float[] corners)
    {
        int n = canvas.Size;
        var image = canvas.Image;
        var mask = canvas.SoftMask;
        for (int y = 0; y < n; y++)
        for (int x = 0; x < n; x++)
        {
            int i = y * n + x, o = 4 * i;
            bool right = x + 1 < n;
            corners[o] = image[i];
            corners[o + 1] = right ? image[i + 1] : 0;
            corners[o + 2] = mask[i];
            corners[o + 3] = right ? mask[i + 1] : 0;
        }
        return corners;
    }

    /// <summary>
    /// Four bilinear samples of the moving canvas's image and soft mask at whole-pixel corners <paramref name="index"/> (all
    /// with a right and a lower neighbour on the canvas) plus (tx, ty), from <see cref="_corners"/>: per sample one load for
    /// the upper two corners of both and one for the lower two, turned into one vector a corner by a 4 × 4 transpose. The
    /// arithmetic is <see cref="Bilinear.CanvasFast"/>'s, lane by lane.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private static unsafe (Vector128<float> Image, Vector128<float> Mask) BilinearBoth(float* corners, Vector128<int> index, int n, Vector128<float> tx, Vector128<float> ty, Vector128<float> one)
    {
        int i0 = index.GetElement(0), i1 = index.GetElement(1), i2 = index.GetElement(2), i3 = index.GetElement(3);
        var (a, b, c, d) = Transpose(Sse.LoadVector128(corners + 4 * i0), Sse.LoadVector128(corners + 4 * i1),
            Sse.LoadVector128(corners + 4 * i2), Sse.LoadVector128(corners + 4 * i3));
        var (e, f, g, h) = Transpose(Sse.LoadVector128(corners + 4 * (i0 + n)), Sse.LoadVector128(corners + 4 * (i1 + n)),
            Sse.LoadVector128(corners + 4 * (i2 + n)), Sse.LoadVector128(corners + 4 * (i3 + n)));
        // a, b: image upper left and right; c, d: mask upper left and right; e–h the same one row down.
        var image = (a + (b - a) * tx) * (one - ty) + (e + (f - e) * tx) * ty;
        var mask = (c + (d - c) * tx) * (one - ty) + (g + (h - g) * tx) * ty;
        return (image, mask);
    }

    /// <summary>Rows t0…t3 of a 4 × 4 block to its columns.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private static (Vector128<float>, Vector128<float>, Vector128<float>, Vector128<float>) Transpose(Vector128<float> t0, Vector128<float> t1, Vector128<float> t2, Vector128<float> t3)
    {
        var u0 = Sse.UnpackLow(t0, t1);   // t0[0] t1[0] t0[1] t1[1]
        var u1 = Sse.UnpackHigh(t0, t1);  // t0[2] t1[2] t0[3] t1[3]
        var u2 = Sse.UnpackLow(t2, t3);
        var u3 = Sse.UnpackHigh(t2, t3);
        return (Sse.MoveLowToHigh(u0, u2), Sse.MoveHighToLow(u2, u0), Sse.MoveLowToHigh(u1, u3), Sse.MoveHighToLow(u3, u1));
    }

    private static double Normalise(double degrees) => ((degrees % 360) + 360) % 360;

    public void Dispose()
    {
        // ImageOps.Warp writes every pixel of the warp buffer before it is read, so it can serve the next pair as it is.
        var spare = _spareWarpBuffers ??= [];
        if (spare.Count < 4) spare.Add(_warped);
        if (_corners is not null && spare.Count < 6) spare.Add(_corners);
        ComplexImagePool.Return(_fixedSpectrum);
        ComplexImagePool.Return(_movingSpectrum);
        ComplexImagePool.Return(_cross);
        ComplexImagePool.Return(_surface);
    }
}
