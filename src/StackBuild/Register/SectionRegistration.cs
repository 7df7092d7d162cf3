using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Register;

public sealed record RegistrationOptions
{
    /// <summary>Long side of the working image in pixels; larger scans are reduced to it (area averaging).</summary>
    public int WorkSize { get; init; } = 512;
    /// <summary>Sub-pixel resolution of the translation: 1/UpsampleFactor working pixel.</summary>
    public double UpsampleFactor { get; init; } = 20;
    /// <summary>Whether the moving section is known to be mounted mirrored (true/false); null tries both.</summary>
    public bool? KnownMirrored { get; init; }
    /// <summary>When false, mirrored mounting is never considered (same as <see cref="KnownMirrored"/> = false).</summary>
    public bool AllowMirror { get; init; } = true;
    public TissuePolarity Polarity { get; init; } = TissuePolarity.Auto;
    /// <summary>Multiply images by their feathered tissue masks before phase correlation.</summary>
    public bool ForegroundMask { get; init; } = true;
    /// <summary>
    /// σ of the Gaussian low-pass on the phase-correlation cross-power, in cycles per working pixel (0 = none).
    /// 0.12 was chosen on the synthetic test pairs: it cut the sub-pixel error of interpolated copies about
    /// threefold against no weighting (measured, see RegisterSyntheticTests).
    /// </summary>
    public double LowPass { get; init; } = 0.12;
    /// <summary>How many rotation peaks of the polar spectrum correlation are tried (each as θ and θ + 180°).</summary>
    public int RotationCandidates { get; init; } = 3;
    /// <summary>The angle refinement stops once its step is below this (degrees); steps go 0.5°, 0.1°, 0.02°.</summary>
    public double AngleTolerance { get; init; } = 0.05;
    /// <summary>
    /// Search and refine hypotheses on half-size canvases, then polish at the working size (when both sections' tissue is
    /// large enough); false does every step at the working size, as before this option existed (for comparison).
    /// </summary>
    public bool CoarseToFine { get; init; } = true;
}

/// <summary>
/// One hypothesis of how the moving section lies on the fixed one. <see cref="MovingToFixed"/> maps
/// full-resolution pixel coordinates of the moving scan to full-resolution pixel coordinates of the fixed scan;
/// <see cref="RotationDegrees"/> is its rotation after any left-right mirror (positive turns +x towards +y);
/// <see cref="Ncc"/> is the normalised cross-correlation of the two working images over their tissue once the
/// moving one is laid on the fixed one; <see cref="PeakToSidelobe"/> is that of the phase correlation that
/// gave the translation.
/// </summary>
public sealed record PairHypothesis(Transform2D MovingToFixed, bool Mirrored, double RotationDegrees, double Ncc, double PeakToSidelobe);

/// <summary>
/// The best hypothesis, the best clearly different one (other mirror, or a rotation more than 10° away; null
/// when only one was tried), and a confidence in [0, 1]:
/// <c>Confidence = clamp((Ncc_best − 0.2)/0.5, 0, 1) · (1 − exp(−gap/0.02))</c> with
/// gap = Ncc_best − Ncc_runnerUp (gap = Ncc_best without a runner-up). The first factor says the sections
/// match at all (NCC ≥ 0.7 counts fully), the second that nothing else matches nearly as well (a 0.05 lead
/// gives 0.92). Both are rules of thumb of this project, set on the test pairs, not published values.
/// </summary>
public sealed record PairResult(PairHypothesis Best, PairHypothesis? RunnerUp, double Confidence)
{
    /// <summary>The best hypothesis with the other mirror than <see cref="Best"/>; null when only one mirror was tried.</summary>
    public PairHypothesis? OtherMirror { get; init; }
    /// <summary>NCC of the best hypothesis with <see cref="Best"/>'s mirror more than 10° away from it; null when none was tried.</summary>
    public double? SameMirrorRunnerUpNcc { get; init; }
    /// <summary>The same for <see cref="OtherMirror"/>.</summary>
    public double? OtherMirrorRunnerUpNcc { get; init; }

    /// <summary>The NCC of the best hypothesis with relative mirror <paramref name="mirrored"/>, or null when it was not tried.</summary>
    public double? NccFor(bool mirrored) => Best.Mirrored == mirrored ? Best.Ncc : OtherMirror?.Ncc;

    /// <summary>
    /// This pair with its mirror settled from outside (by the whole stack, <see cref="Solve.MirrorParity"/>): the best
    /// hypothesis of that mirror, the other mirror's as runner-up, and a confidence that asks only whether the angle is
    /// distinct within that mirror (the same rule, against the best hypothesis more than 10° away with the same mirror).
    /// Itself when the mirror is already <see cref="Best"/>'s or the other was not tried.
    /// </summary>
    public PairResult WithMirror(bool mirrored)
    {
        if (Best.Mirrored == mirrored)
            return this with { Confidence = SectionRegistration.Confidence(Best.Ncc, SameMirrorRunnerUpNcc) };
        if (OtherMirror is null) return this;
        return new PairResult(OtherMirror, Best, SectionRegistration.Confidence(OtherMirror.Ncc, OtherMirrorRunnerUpNcc))
        {
            OtherMirror = Best,
            SameMirrorRunnerUpNcc = OtherMirrorRunnerUpNcc,
            OtherMirrorRunnerUpNcc = SameMirrorRunnerUpNcc,
        };
    }
}

/// <summary>
/// Pairwise rigid registration of two sections (rotation at any angle, translation, optional left-right
/// mirror). Pure functions: images in, transforms out.
/// </summary>
/// <remarks>
/// Steps: rotation candidates from log-polar magnitude spectra (Reddy &amp; Chatterji 1996); for each candidate
/// θ and θ + 180° (and for the mirrored moving image) the translation by phase correlation (Kuglin &amp; Hines
/// 1975) and the NCC of the result; the two best distinct hypotheses are refined by successive parabolic
/// interpolation of NCC over angle, the translation re-estimated at each angle to 1/UpsampleFactor pixel
/// (Guizar-Sicairos et al. 2008).
/// </remarks>
public static class SectionRegistration
{
    /// <summary>
    /// The version of what a pair's result is computed by. Builds keep registered pairs between runs (the pair cache,
    /// Pipeline/PairCache.cs) under a hash of both sections' working pixels, the registration options, the FFT in use,
    /// the program's version and this number. Add one to it in any change that can alter a pair's result for the same
    /// images and options: this file, <see cref="PairEngine"/>, <see cref="PhaseCorrelation"/>, <see cref="PolarSpectrum"/>,
    /// <see cref="PreparedSection"/>, <see cref="Preprocessing"/>, or a shared tool they call (warps, bilinear sampling,
    /// Gaussian blur, the FFT); otherwise a build with a filled cache keeps the old results (DEVELOPERS.md).
    /// </summary>
    public const int CodeVersion = 4;

    private const double CoarseUpsample = 1; // whole pixels suffice to rank hypotheses; the best two are refined
    private const double DistinctDegrees = 10;
    /// <summary>A pair searched at working size (small tissue) whose best NCC is below this is searched again over every angle.</summary>
    private const double SweepBelowNcc = 0.3;
    private const double SweepStepDegrees = 6;
    /// <summary>
    /// What a swept angle must score to replace the best: a match of the kind nearest neighbours at a specimen's ends give
    /// (0.42–0.74 on the held-out cuts). Lower maxima of a sweep over every angle are as often chance as not (jhu189 j,
    /// seed 83: pairs whose truth scores 0.06 or less swept to 0.26–0.31 at 140° off, and the chain trusted them).
    /// </summary>
    private const double SweptMinNcc = 0.4;
    /// <summary>Both sections' tissue must reach this far from the half canvas's centre (half pixels) for the search to run there.</summary>
    private const double MinHalfTissueRadius = 64;
    /// <summary>The half-size polish stops below this step (half pixels); the polish at full size starts at <see cref="FinePolishStartStep"/>.</summary>
    private const double HalfPolishMinStep = 0.125;
    private const double FinePolishStartStep = 0.0625;

    /// <summary>
    /// Preprocessing done once per section; the result is reused for every pair it is part of. The image is reduced
    /// to <see cref="RegistrationOptions.WorkSize"/> on its long side first.
    /// </summary>
    public static PreparedSection Prepare(GrayImage fullResolution, RegistrationOptions options) =>
        Prepare(fullResolution, Preprocessing.WorkScale(fullResolution.Width, fullResolution.Height, options.WorkSize).Scale, options);

    /// <summary>
    /// As <see cref="Prepare(GrayImage, RegistrationOptions)"/> for an image already at its registration pixel size (a
    /// build brings every section to one such size first): it is not reduced, whatever the work size.
    /// </summary>
    /// <param name="canvases">When given, the section's registration canvas is kept only while the cache holds it (see
    /// <see cref="PreparedSection"/>); otherwise it is kept with the section.</param>
    /// <remarks>The section keeps <paramref name="workImage"/> (which must not change afterwards) and makes its preprocessed
    /// image from it when asked, rather than holding both (<see cref="PreparedSection.WorkImage"/>).</remarks>
    public static PreparedSection PrepareUnreduced(GrayImage workImage, RegistrationOptions options, CanvasCache? canvases = null) =>
        PrepareUnreduced(new HeldImage(workImage), options, canvases);

    /// <summary>
    /// As <see cref="PrepareUnreduced(GrayImage, RegistrationOptions, CanvasCache?)"/> for an image held by an
    /// <see cref="ImageSpill"/>: the section reads it back when its preprocessed image is asked for.
    /// </summary>
    public static PreparedSection PrepareUnreduced(HeldImage held, RegistrationOptions options, CanvasCache? canvases = null)
    {
        var workImage = held.Load();
        var work = workImage.Clone();
        bool invert = ShouldInvert(work, options);
        var (lo, range) = Stretch(work, invert);
        return PreparedSection.Derived(workImage.Width, workImage.Height, held, work, lo, range, invert, options.ForegroundMask, canvases);
    }

    private static bool ShouldInvert(GrayImage work, RegistrationOptions options) => options.Polarity switch
    {
        TissuePolarity.DarkOnBright => true,
        TissuePolarity.BrightOnDark => false,
        _ => Preprocessing.HasBrightBackground(work),
    };

    /// <summary>The preprocessing of every prepared image, in place: negated when <paramref name="invert"/>, then stretched to 0–1
    /// (<see cref="Preprocessing.NormaliseRobustRange"/>, whose map it returns).</summary>
    private static (float Lo, float Range) Stretch(GrayImage work, bool invert)
    {
        if (invert) for (int i = 0; i < work.Pixels.Length; i++) work.Pixels[i] = -work.Pixels[i];
        return Preprocessing.NormaliseRobustRange(work.Pixels);
    }

    /// <summary>
    /// Tissue smaller than this many pixels at the working size (an 80 × 80 pixel area; a rule of thumb of this project,
    /// set on the 768-pixel ch2bet series of docs/benchmarks.md, whose first sections hold 1.5–2 % of the canvas) is
    /// registered on a finer image where one is at hand (<see cref="WithFiner"/>).
    /// </summary>
    public const int FinerBelowTissuePixels = 6400;

    /// <summary>
    /// <paramref name="prepared"/> with a <see cref="PreparedSection.Finer"/> made from <paramref name="finer"/> (the same
    /// section at <paramref name="scale"/> finer pixels, edge-aligned: <c>Resampler.EdgeAlignedScale(scale)</c> maps the
    /// prepared section's pixels onto it) when its tissue is under <see cref="FinerBelowTissuePixels"/> and the finer image
    /// is at least 1.25 times finer; otherwise <paramref name="prepared"/> itself. The finer image is inverted as the
    /// prepared one was.
    /// </summary>
    public static PreparedSection WithFiner(PreparedSection prepared, GrayImage finer, double scale, RegistrationOptions options, CanvasCache? canvases = null)
    {
        if (scale < 1.25 || prepared.Scale != 1 || prepared.TissueMask.Count(t => t) >= FinerBelowTissuePixels) return prepared;
        var work = finer.Clone();
        Stretch(work, prepared.Inverted);
        prepared.Finer = new PreparedSection(prepared.FullWidth, prepared.FullHeight, scale, work, prepared.Inverted, options.ForegroundMask, canvases);
        return prepared;
    }

    private static PreparedSection Prepare(GrayImage fullResolution, double scale, RegistrationOptions options, CanvasCache? canvases = null)
    {
        var work = Preprocessing.Reduce(fullResolution, scale);
        bool invert = ShouldInvert(work, options);
        Stretch(work, invert);
        return new PreparedSection(fullResolution.Width, fullResolution.Height, scale, work, invert, options.ForegroundMask, canvases);
    }

    /// <summary>
    /// Registers <paramref name="moving"/> onto <paramref name="fixedSection"/>. Always returns a result; for
    /// sections that do not match (empty, unrelated) the confidence is low rather than an error raised.
    /// </summary>
    public static PairResult Register(PreparedSection fixedSection, PreparedSection moving, RegistrationOptions options)
    {
        // Two small sections (a specimen's ends) are registered on their finer images where both have one: their maps are
        // in the same coordinates, so the result needs no conversion.
        if (fixedSection.Finer is { } fixedFiner && moving.Finer is { } movingFiner) return Register(fixedFiner, movingFiner, options);
        // Both must be at one working scale for the map to stay rigid at full resolution.
        if (Math.Abs(fixedSection.Scale - moving.Scale) > 1e-12 * Math.Max(fixedSection.Scale, moving.Scale))
        {
            if (fixedSection.Scale > moving.Scale) fixedSection = fixedSection.AtScale(moving.Scale);
            else moving = moving.AtScale(fixedSection.Scale);
        }
        var (fixedCanvas, movingCanvas) = OnOneCanvas(fixedSection, moving);
        using var engine = new PairEngine(fixedCanvas, movingCanvas, options.LowPass);
        // Coarse to fine: hypotheses are searched and their angles refined on the half-size canvases when both sections'
        // tissue is large enough there, then polished here; small sections (a specimen's ends) stay at this size throughout.
        bool useHalf = options.CoarseToFine && fixedCanvas.Half is { } fh && movingCanvas.Half is { } mh && Math.Min(fh.TissueRadius, mh.TissueRadius) >= MinHalfTissueRadius;
        using var half = useHalf ? new PairEngine(fixedCanvas.Half!, movingCanvas.Half!, options.LowPass) : null;
        var search = half ?? engine;
        // A hypothesis found by the search brought here (NCC measured here, so every NCC compared below is at one size).
        PairEngine.Evaluation Here(PairEngine.Evaluation e) => half is null ? e : engine.FromHalf(e);
        // A refined hypothesis polished: on the half canvases to an eighth of their pixel, then here from a sixteenth of a
        // pixel down, with the peak-to-sidelobe ratio of this size's phase correlation at the angle found.
        PairEngine.Evaluation Finish(PairEngine.Evaluation refined)
        {
            if (half is null) return engine.Polish(refined);
            var coarsePolished = half.Polish(refined, 1, HalfPolishMinStep);
            var shift = engine.Evaluate(coarsePolished.Mirrored, coarsePolished.Degrees, CoarseUpsample).Shift;
            return engine.Polish(engine.FromHalf(coarsePolished, shift), FinePolishStartStep, 1.0 / 32);
        }

        bool[] mirrors = options.KnownMirrored is { } known ? [known && options.AllowMirror] : options.AllowMirror ? [false, true] : [false];
        var coarse = new List<PairEngine.Evaluation>();
        foreach (bool mirrored in mirrors)
        foreach (var (degrees, _) in PolarSpectrum.CandidateAngles(fixedCanvas.Polar, movingCanvas.Polar, mirrored, Math.Max(1, options.RotationCandidates)))
        {
            coarse.Add(search.Evaluate(mirrored, degrees, CoarseUpsample));
            coarse.Add(search.Evaluate(mirrored, degrees + 180, CoarseUpsample));
        }
        coarse.Sort((a, b) => b.Ncc.CompareTo(a.Ncc));
        double step = PolarSpectrum.DegreesPerBin;
        // Per mirror: the best coarse hypothesis refined and polished, and the best one more than 10° away from it (its
        // runner-up) refined too, polished where it overtakes, the other kept as that mirror's runner-up, so that a mirror
        // decided for the whole stack (MirrorParity) can still say how distinct the chosen angle is. The leading mirror's
        // runner-up is always refined; the other mirror's where the search runs at this size (small tissue, a specimen's
        // ends), whose coarse NCC (whole pixels) often ties between angles, so that both mirrors are searched equally hard
        // where the mirror decision is hardest (inia19-t1-brain j, seed 79, section 76 onto 75: the right side's two leading
        // angles tied at 0.656 coarse; the first refined to 0.676, the second, 160° away, to 0.806, above the wrong side's
        // 0.782). On larger tissue the other mirror's runner-up stays coarse: refining it cost 14 % of a pair's time there.
        var perMirror = new List<(PairHypothesis Best, double? RunnerUpNcc, PairEngine.Evaluation? RunnerUp)>();
        var firsts = mirrors.Select(m =>
        {
            var first = Finish(search.Refine(coarse.First(e => e.Mirrored == m), step, options.AngleTolerance, options.UpsampleFactor));
            return (Refined: first, Second: coarse.FirstOrDefault(e => e.Mirrored == m && IsDistinct(e, first)));
        }).OrderByDescending(f => f.Refined.Ncc).ToList();
        for (int n = 0; n < firsts.Count; n++)
        {
            var (refined, second) = firsts[n];
            if (second is null) { perMirror.Add((ToHypothesis(refined, fixedCanvas, movingCanvas), null, null)); continue; }
            if (n > 0 && half is not null) { var coarseHere = Here(second); perMirror.Add((ToHypothesis(refined, fixedCanvas, movingCanvas), coarseHere.Ncc, coarseHere)); continue; }
            var refinedSearch = search.Refine(second, step, options.AngleTolerance, options.UpsampleFactor);
            var refinedSecond = Here(refinedSearch);
            if (refinedSecond.Ncc > refined.Ncc) refinedSecond = Finish(refinedSearch);
            if (refinedSecond.Ncc > refined.Ncc) (refined, refinedSecond) = (refinedSecond, refined); // the runner-up overtook
            perMirror.Add((ToHypothesis(refined, fixedCanvas, movingCanvas), refinedSecond.Ncc, refinedSecond));
        }
        var hypotheses = perMirror.Select(p => (p.Best, p.RunnerUpNcc, RunnerUp: p.RunnerUp is { } r ? ToHypothesis(r, fixedCanvas, movingCanvas) : null)).ToList();
        // Small tissue with a weak best match: the log-polar spectra of a few thousand tissue pixels can miss the angle
        // altogether (ch2bet k, held-out seed 83: section 73, 1.4 % of the canvas, onto 71 found NCC 0.128 at 87.5° from
        // the truth, which scores 0.461). Every angle is then tried in coarse steps, for each mirror alike, and the best
        // refined; it replaces that mirror's best where it scores higher and reaches SweptMinNcc, the old best becoming its
        // runner-up.
        if (half is null && hypotheses.Max(h => h.Best.Ncc) < SweepBelowNcc)
            for (int i = 0; i < hypotheses.Count; i++)
            {
                var (best, _, _) = hypotheses[i];
                PairEngine.Evaluation? top = null;
                for (double degrees = 0; degrees < 360; degrees += SweepStepDegrees)
                {
                    var e = engine.Evaluate(best.Mirrored, degrees, CoarseUpsample);
                    if (top is null || e.Ncc > top.Ncc) top = e;
                }
                if (top is null || top.Ncc <= best.Ncc) continue;
                var swept = Finish(engine.Refine(top, SweepStepDegrees / 2, options.AngleTolerance, options.UpsampleFactor));
                if (swept.Ncc <= best.Ncc || swept.Ncc < SweptMinNcc) continue;
                var sweptHypothesis = ToHypothesis(swept, fixedCanvas, movingCanvas);
                bool distinct = PolarSpectrum.AngularDistance(sweptHypothesis.RotationDegrees, best.RotationDegrees) > DistinctDegrees;
                hypotheses[i] = distinct ? (sweptHypothesis, best.Ncc, best) : (sweptHypothesis, hypotheses[i].RunnerUpNcc, hypotheses[i].RunnerUp);
            }
        hypotheses.Sort((a, b) => b.Best.Ncc.CompareTo(a.Best.Ncc));
        var (bestHypothesis, sameRunnerUpNcc, sameRunnerUp) = hypotheses[0];
        var other = hypotheses.Count > 1 ? hypotheses[1] : default;
        // The runner-up overall: the better of the other mirror's best and this mirror's distinct runner-up.
        PairHypothesis? runnerUp = other.Best;
        if (sameRunnerUp is not null && (runnerUp is null || sameRunnerUp.Ncc > runnerUp.Ncc))
            runnerUp = sameRunnerUp;
        return new PairResult(bestHypothesis, runnerUp, Confidence(bestHypothesis.Ncc, runnerUp?.Ncc))
        {
            OtherMirror = other.Best,
            SameMirrorRunnerUpNcc = sameRunnerUpNcc,
            OtherMirrorRunnerUpNcc = other.RunnerUpNcc,
        };
    }

    /// <summary>
    /// The NCC registration scores a placement by (<see cref="PairHypothesis.Ncc"/>) for any map of full-resolution moving
    /// pixels to fixed ones: both at one scale, on their canvases, over the union of their tissue masks. For diagnosis
    /// (is a truth placement scored above what the search found?).
    /// </summary>
    internal static double NccAt(PreparedSection fixedSection, PreparedSection moving, Transform2D movingToFixed)
    {
        if (Math.Abs(fixedSection.Scale - moving.Scale) > 1e-12 * Math.Max(fixedSection.Scale, moving.Scale))
            throw new ArgumentException("both sections must be prepared at one scale");
        var (fixedCanvas, movingCanvas) = OnOneCanvas(fixedSection, moving);
        using var engine = new PairEngine(fixedCanvas, movingCanvas, 0);
        return engine.Ncc(movingCanvas.FullToCanvas.Inverse().Then(movingToFixed).Then(fixedCanvas.FullToCanvas));
    }

    /// <summary>Both sections' canvases at one size (the larger's; the smaller section laid on a canvas of that size).</summary>
    private static (SectionCanvas Fixed, SectionCanvas Moving) OnOneCanvas(PreparedSection fixedSection, PreparedSection moving)
    {
        int n = Math.Max(fixedSection.CanvasSize, moving.CanvasSize);
        return (fixedSection.CanvasSize == n ? fixedSection.Canvas : new SectionCanvas(fixedSection, n),
            moving.CanvasSize == n ? moving.Canvas : new SectionCanvas(moving, n));
    }

    /// <summary>The confidence rule documented on <see cref="PairResult"/>.</summary>
    public static double Confidence(double bestNcc, double? runnerUpNcc)
    {
        double match = Math.Clamp((bestNcc - 0.2) / 0.5, 0, 1);
        double gap = Math.Max(0, bestNcc - (runnerUpNcc ?? 0));
        return match * (1 - Math.Exp(-gap / 0.02));
    }

    private static bool IsDistinct(PairEngine.Evaluation a, PairEngine.Evaluation b) =>
        a.Mirrored != b.Mirrored || PolarSpectrum.AngularDistance(a.Degrees, b.Degrees) > DistinctDegrees;

    private static PairHypothesis ToHypothesis(PairEngine.Evaluation e, SectionCanvas fixedCanvas, SectionCanvas movingCanvas)
    {
        var map = movingCanvas.FullToCanvas.Then(e.CanvasMap).Then(fixedCanvas.FullToCanvas.Inverse());
        return new PairHypothesis(map, e.Mirrored, map.RotationDegrees, e.Ncc, e.Shift.PeakToSidelobe);
    }
}
