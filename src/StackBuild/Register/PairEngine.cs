using StackBuild.Geometry;

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
    private readonly float[] _warped, _warpedMask;
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
        _warped = new float[_n * _n];
        _warpedMask = new float[_n * _n];
        _spectralWeight = lowPass > 0 ? PhaseCorrelation.GaussianSpectralWeight(_n, _n, lowPass) : null;
    }

    /// <summary>
    /// Turns the moving canvas (mirrored first when asked) by <paramref name="degrees"/> about the canvas
    /// centre, finds the translation by phase correlation and scores the result by NCC.
    /// </summary>
    public Evaluation Evaluate(bool mirrored, double degrees, double upsample)
    {
        double c = _fixed.Centre;
        var turn = (mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, c, c));
        ImageOps.Warp(_moving.Signal, _n, turn, _warped);
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

    /// <summary>NCC of fixed and moving-laid-on-fixed over the union of their tissue masks.</summary>
    private double Ncc(Transform2D map)
    {
        ImageOps.Warp(_moving.Image, _n, map, _warped);
        ImageOps.Warp(_moving.SoftMask, _n, map, _warpedMask);
        var f = _fixed.Image;
        var fm = _fixed.SoftMask;
        double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
        long count = 0;
        for (int i = 0; i < f.Length; i++)
        {
            if (fm[i] <= 0.5f && _warpedMask[i] <= 0.5f) continue;
            double x = f[i], y = _warped[i];
            sa += x; sb += y; saa += x * x; sbb += y * y; sab += x * y;
            count++;
        }
        if (count < 16) return 0;
        double cov = sab - sa * sb / count, va = saa - sa * sa / count, vb = sbb - sb * sb / count;
        return va > 0 && vb > 0 ? cov / Math.Sqrt(va * vb) : 0;
    }

    private static double Normalise(double degrees) => ((degrees % 360) + 360) % 360;

    public void Dispose()
    {
        _fixedSpectrum.Dispose();
        _movingSpectrum.Dispose();
        _cross.Dispose();
        _surface.Dispose();
    }
}
