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
    /// Golden-section search of NCC over angle within ±<paramref name="bracket"/>° of the hypothesis, the
    /// translation re-estimated at each angle; stops when the bracket is narrower than
    /// <paramref name="tolerance"/>. Returns the best angle evaluated.
    /// </summary>
    public Evaluation Refine(Evaluation start, double bracket, double tolerance, double upsample)
    {
        double invPhi = (Math.Sqrt(5) - 1) / 2;
        double a = start.Degrees - bracket, b = start.Degrees + bracket;
        double x1 = b - invPhi * (b - a), x2 = a + invPhi * (b - a);
        var best = Evaluate(start.Mirrored, start.Degrees, upsample);
        var e1 = Evaluate(start.Mirrored, x1, upsample);
        var e2 = Evaluate(start.Mirrored, x2, upsample);
        while (b - a > tolerance)
        {
            if (e1.Ncc >= e2.Ncc)
            {
                b = x2; x2 = x1; e2 = e1;
                x1 = b - invPhi * (b - a);
                e1 = Evaluate(start.Mirrored, x1, upsample);
            }
            else
            {
                a = x1; x1 = x2; e1 = e2;
                x2 = a + invPhi * (b - a);
                e2 = Evaluate(start.Mirrored, x2, upsample);
            }
            if (e1.Ncc > best.Ncc) best = e1;
            if (e2.Ncc > best.Ncc) best = e2;
        }
        return best;
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
