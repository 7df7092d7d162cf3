using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Template;

/// <summary>Settings for registering a section to a template slice.</summary>
public sealed record TemplateRegistrationOptions
{
    /// <summary>Grey-level bins per image in the joint histogram (32 is common practice for MI of 8-bit-like images).</summary>
    public int Bins { get; init; } = 32;
    /// <summary>Most pyramid levels (each halves the size); the coarsest keeps at least <see cref="CoarsestSize"/> pixels on its shorter side.</summary>
    public int Levels { get; init; } = 3;
    public int CoarsestSize { get; init; } = 40;
    /// <summary>Angle step of the global search (used when no start is given), degrees.</summary>
    public double GlobalAngleStepDegrees { get; init; } = 10;
    /// <summary>Whether the global search also tries the mirrored section (mounted face down).</summary>
    public bool TryMirror { get; init; } = true;
    /// <summary>Candidates of the global search carried through the pyramid.</summary>
    public int GlobalCandidates { get; init; } = 4;
    /// <summary>Smallest shift step of the local search at full size, pixels (the angle step is matched to it at the tissue radius).</summary>
    public double FinalStepPx { get; init; } = 0.05;
    /// <summary>Most samples per measurement at full size (a coarser sampling grid beyond).</summary>
    public int MaxSamples { get; init; } = 1 << 14;
    /// <summary>
    /// A global search also refines the best placement with the other mirror to full size and reports its similarity
    /// (<see cref="TemplateMatch.OtherMirrorSimilarity"/>): the template's evidence for which side of the section is up.
    /// </summary>
    public bool MeasureOtherMirror { get; init; }
}

/// <summary>A section placed on a template slice.</summary>
/// <param name="SectionToSlice">Section pixels to slice pixels (rigid, possibly mirrored).</param>
/// <param name="Similarity">Normalised mutual information minus one, (H(A)+H(B))/H(A,B) − 1, in [0, 1] (Studholme et al. 1999).</param>
/// <param name="MutualInformation">Mutual information in nats.</param>
/// <param name="Confidence">
/// In [0, 1]: how far the match stands above the same placement turned by 90°, 180° and 270° about the tissue centre
/// (1 − best of those / Similarity, scaled so that 0.5 gives 1; this project's scale). Near 0: no distinct optimum.
/// </param>
/// <param name="RunnerUpSimilarity">The best distinct candidate of the global search (another angle or the other mirror), measured at half size, or null after a local search.</param>
/// <param name="Evaluations">Measurements made (for profiling).</param>
/// <param name="OtherMirrorSimilarity">The best placement with the other mirror, refined to full size (global search with
/// <see cref="TemplateRegistrationOptions.MeasureOtherMirror"/>), or null.</param>
public sealed record TemplateMatch(Transform2D SectionToSlice, double Similarity, double MutualInformation, double Confidence,
    bool Mirrored, double? RunnerUpSimilarity, int Samples, int Evaluations, double? OtherMirrorSimilarity = null);

/// <summary>
/// Rigid registration of a histology section to a template slice by maximising normalised mutual information
/// (Studholme, Hill &amp; Hawkes 1999, Pattern Recognit. 32:71; mutual information after Viola &amp; Wells 1997,
/// Int. J. Comput. Vis. 24:137), which tolerates any monotone or non-monotone change of contrast between stain and
/// template (dark tissue on bright glass against bright tissue on a dark background).
/// Search: coarse to fine over an image pyramid (2×2 block means), a pattern search on angle and shift at each level;
/// without a start, first a global search over angles (and the mirror) with the tissue centres put together.
/// </summary>
public static class TemplateRegistration
{
    /// <summary>
    /// Places <paramref name="section"/> on <paramref name="slice"/> (both at the same pixel size). With a
    /// <paramref name="start"/> (section pixels to slice pixels; its mirror is kept and any scale in it is ignored) the
    /// search is local, from the coarsest pyramid level (it reaches a few pixels and degrees per level); without one, it
    /// is global over angles every <see cref="TemplateRegistrationOptions.GlobalAngleStepDegrees"/> and both mirrors.
    /// When the images share nothing the result has a similarity near 0 and a low confidence; it never throws for content.
    /// </summary>
    public static TemplateMatch Register(GrayImage section, GrayImage slice, Transform2D? start, TemplateRegistrationOptions? options = null)
    {
        // Registered on the tissue, not on the canvas: a small end section on a wide slide image is cropped to its tissue
        // (plus a margin), so the coarsest pyramid level, where the global search turns it, still sees its shape rather than
        // a few pixels. The match is carried back to the whole image's pixels.
        if (TissueBox(section) is { } box)
        {
            var crop = section.Crop(box.X, box.Y, box.Width, box.Height);
            var toCrop = Transform2D.Translation(-box.X, -box.Y);
            var inner = RegisterWhole(crop, slice, start is { } s0 ? toCrop.Inverse().Then(s0) : null, options);
            return inner with { SectionToSlice = toCrop.Then(inner.SectionToSlice) };
        }
        return RegisterWhole(section, slice, start, options);
    }

    /// <summary>
    /// The tissue's bounding box (2nd to 98th percentile of the tissue pixels' x and y, as <see cref="TissueCentre"/> finds
    /// them) widened by a quarter of its larger side and at least 8 pixels, when that box covers at most half of the image;
    /// null otherwise (nothing gained by cropping) or when there is no tissue.
    /// </summary>
    internal static (int X, int Y, int Width, int Height)? TissueBox(GrayImage image)
    {
        var xs = new List<int>();
        var ys = new List<int>();
        foreach (var (x, y) in TissuePixels(image, HistogramMutualInformation.RobustRange(image))) { xs.Add(x); ys.Add(y); }
        if (xs.Count < 16) return null;
        xs.Sort(); ys.Sort();
        int Q(List<int> v, double q) => v[(int)Math.Round(q * (v.Count - 1))];
        int x0 = Q(xs, 0.02), x1 = Q(xs, 0.98), y0 = Q(ys, 0.02), y1 = Q(ys, 0.98);
        int margin = Math.Max(8, (int)Math.Ceiling(0.25 * Math.Max(x1 - x0 + 1, y1 - y0 + 1)));
        x0 = Math.Max(0, x0 - margin); y0 = Math.Max(0, y0 - margin);
        x1 = Math.Min(image.Width - 1, x1 + margin); y1 = Math.Min(image.Height - 1, y1 + margin);
        int w = x1 - x0 + 1, h = y1 - y0 + 1;
        return (long)w * h <= (long)image.Width * image.Height / 2 ? (x0, y0, w, h) : null;
    }

    private static TemplateMatch RegisterWhole(GrayImage section, GrayImage slice, Transform2D? start, TemplateRegistrationOptions? options)
    {
        options ??= new TemplateRegistrationOptions();
        var problem = new Problem(section, slice, options);
        int evaluations = 0;
        if (start is { } s)
        {
            var p = problem.FromTransform(s);
            p = problem.Refine(p, problem.Levels.Count - 1, ref evaluations);
            return problem.Finish(p, null, ref evaluations);
        }

        // Global: every angle (and mirror) at the coarsest level, the tissue centres together, a short shift search each.
        int top = problem.Levels.Count - 1;
        var candidates = new List<(Pose Pose, double Score)>();
        foreach (bool mirrored in options.TryMirror ? new[] { false, true } : new[] { false })
            for (double a = -180; a < 180 - 1e-9; a += options.GlobalAngleStepDegrees)
            {
                var pose = new Pose(a, 0, 0, mirrored);
                pose = problem.Search(pose, top, problem.Levels[top].Scale * 2, problem.Levels[top].Scale, shiftOnly: true, ref evaluations);
                candidates.Add((pose, problem.Score(pose, top, ref evaluations)));
            }
        candidates.Sort((x, y) => y.Score.CompareTo(x.Score));
        // When both mirrors are to be measured (the template's vote on the side), each gets the same number of candidates:
        // one mirror refined from four angles against the other's single best coarse angle favoured the first wherever the
        // coarsest level could hardly tell angles apart (a small end section), and such a lopsided vote turned sections over
        // (natbrainlab j, seed 79: section 74 mirrored by 0.154 against 0.049, wrong; docs/accuracy.md).
        bool both = options.TryMirror && options.MeasureOtherMirror;
        var chosen = new List<Pose>();
        foreach (var c in candidates)
        {
            if (chosen.Count >= options.GlobalCandidates * (both ? 2 : 1)) break;
            if (both && chosen.Count(o => o.Mirrored == c.Pose.Mirrored) >= options.GlobalCandidates) continue;
            if (chosen.Any(o => o.Mirrored == c.Pose.Mirrored && AngleGap(o.Degrees, c.Pose.Degrees) < 1.5 * options.GlobalAngleStepDegrees)) continue;
            chosen.Add(c.Pose);
        }
        // Candidates are refined down to the second-finest level and compared there; only the best goes on to full size.
        int compare = Math.Min(1, top);
        var refined = new List<(Pose Pose, double Score)>();
        foreach (var c in chosen)
        {
            var p = problem.Refine(c, top, compare, ref evaluations);
            refined.Add((p, problem.Score(p, compare, ref evaluations)));
        }
        refined.Sort((x, y) => y.Score.CompareTo(x.Score));
        var best = refined[0];
        if (compare > 0) best = (problem.Refine(best.Pose, compare - 1, 0, ref evaluations), 0);
        best.Score = problem.Score(best.Pose, 0, ref evaluations);
        double? runnerUp = refined.Skip(1).Where(r => r.Pose.Mirrored != best.Pose.Mirrored || AngleGap(r.Pose.Degrees, best.Pose.Degrees) > 5
                                                      || double.Hypot(r.Pose.Dx - best.Pose.Dx, r.Pose.Dy - best.Pose.Dy) > 5)
            .Select(r => (double?)(r.Score - 1)).FirstOrDefault(); // at the comparison level
        double? otherMirror = null;
        if (options.TryMirror && options.MeasureOtherMirror)
        {
            // The other mirror's best: its refined candidate when one was carried, else its best coarse candidate refined.
            var other = refined.Where(r => r.Pose.Mirrored != best.Pose.Mirrored).Select(r => (Pose?)r.Pose).FirstOrDefault()
                        ?? problem.Refine(candidates.First(c => c.Pose.Mirrored != best.Pose.Mirrored).Pose, top, compare, ref evaluations);
            var full = compare > 0 ? problem.Refine(other, compare - 1, 0, ref evaluations) : other;
            otherMirror = problem.Score(full, 0, ref evaluations) - 1;
        }
        return problem.Finish(best.Pose, runnerUp, ref evaluations) with { OtherMirrorSimilarity = otherMirror };
    }

    internal static double AngleGap(double a, double b)
    {
        double d = Math.Abs(a - b) % 360;
        return d > 180 ? 360 - d : d;
    }

    /// <summary>A rigid placement: mirror (about x) then rotation about the section's tissue centre, which lands at the slice's tissue centre plus (Dx, Dy).</summary>
    internal readonly record struct Pose(double Degrees, double Dx, double Dy, bool Mirrored);

    private sealed class Level
    {
        public required byte[] SectionBins;
        public required int Width, Height;
        public required GrayImage Slice;
        public required double Scale; // full-size pixels per level pixel
        public required Transform2D LevelToFull, FullToLevel;
        public required int Stride;
    }

    private sealed class Problem
    {
        private readonly int _bins;
        private readonly double _radius;
        private readonly double _finalStep;
        private readonly double[] _joint;
        private readonly (double X, double Y) _sectionCentre, _sliceCentre;
        public List<Level> Levels { get; } = [];

        public Problem(GrayImage section, GrayImage slice, TemplateRegistrationOptions options)
        {
            _bins = options.Bins;
            _finalStep = options.FinalStepPx;
            _joint = new double[_bins * _bins];
            var sectionRange = HistogramMutualInformation.RobustRange(section);
            var sliceRange = HistogramMutualInformation.RobustRange(slice);
            _sectionCentre = TissueCentre(section, sectionRange, out double radius);
            _sliceCentre = TissueCentre(slice, sliceRange, out _);
            _radius = Math.Max(radius, 8);
            GrayImage a = section, b = slice;
            for (int level = 0; ; level++)
            {
                int factor = 1 << level;
                int stride = 1;
                while ((long)(a.Width / stride) * (a.Height / stride) > options.MaxSamples) stride++;
                Levels.Add(new Level
                {
                    SectionBins = HistogramMutualInformation.QuantiseHard(a, _bins, sectionRange),
                    Width = a.Width, Height = a.Height,
                    Slice = HistogramMutualInformation.ScaleSoft(b, _bins, sliceRange),
                    Scale = factor,
                    LevelToFull = Resampler.FullToBlockReduced(factor).Inverse(),
                    FullToLevel = Resampler.FullToBlockReduced(factor),
                    Stride = stride,
                });
                if (level + 1 >= options.Levels || Math.Min(a.Width, a.Height) / 2 < options.CoarsestSize
                    || Math.Min(b.Width, b.Height) / 2 < options.CoarsestSize / 2) break;
                a = Reduce(a);
                b = Reduce(b);
            }
        }

        public Transform2D ToTransform(Pose p)
        {
            var m = Transform2D.Translation(-_sectionCentre.X, -_sectionCentre.Y);
            if (p.Mirrored) m = m.Then(Transform2D.MirrorX());
            return m.Then(Transform2D.Rotation(p.Degrees)).Then(Transform2D.Translation(_sliceCentre.X + p.Dx, _sliceCentre.Y + p.Dy));
        }

        public Pose FromTransform(Transform2D t)
        {
            var (x, y) = t.Apply(_sectionCentre.X, _sectionCentre.Y);
            return new Pose(t.RotationDegrees, x - _sliceCentre.X, y - _sliceCentre.Y, t.IsMirrored);
        }

        public double Score(Pose p, int level, ref int evaluations) => Measure(p, level, ref evaluations).Normalised;

        public MutualInformationValue Measure(Pose p, int level, ref int evaluations)
        {
            evaluations++;
            var l = Levels[level];
            var map = l.LevelToFull.Then(ToTransform(p)).Then(l.FullToLevel);
            var joint = _joint;
            Array.Clear(joint);
            int n = HistogramMutualInformation.Accumulate(l.SectionBins, l.Width, l.Height, l.Slice, l.Slice.Width, l.Slice.Height, map, _bins, joint, l.Stride);
            // Too little overlap cannot be trusted: a placement that leaves the section mostly off the slice scores nothing.
            int possible = ((l.Width + l.Stride - 1) / l.Stride) * ((l.Height + l.Stride - 1) / l.Stride);
            if (n < possible / 4) return new MutualInformationValue(0, 1, 0, 0, 0, n);
            return HistogramMutualInformation.FromJoint(joint, _bins, n);
        }

        /// <summary>Coarse to fine from <paramref name="fromLevel"/> down to full size.</summary>
        public Pose Refine(Pose p, int fromLevel, ref int evaluations) => Refine(p, fromLevel, 0, ref evaluations);

        /// <summary>Coarse to fine from <paramref name="fromLevel"/> down to <paramref name="toLevel"/>.</summary>
        public Pose Refine(Pose p, int fromLevel, int toLevel, ref int evaluations)
        {
            for (int level = fromLevel; level >= toLevel; level--)
            {
                double scale = Levels[level].Scale;
                double startStep = level == fromLevel ? 2 * scale : scale;
                double endStep = level == 0 ? _finalStep : 0.25 * scale;
                p = Search(p, level, startStep, endStep, shiftOnly: false, ref evaluations);
            }
            return p;
        }

        /// <summary>Pattern search (compass search): try ± a step on each parameter, move on improvement, halve the steps when none improves.</summary>
        public Pose Search(Pose p, int level, double startStepPx, double endStepPx, bool shiftOnly, ref int evaluations)
        {
            double best = Score(p, level, ref evaluations);
            double step = startStepPx;
            int guard = 0;
            while (step >= endStepPx - 1e-12 && guard++ < 400)
            {
                double angleStep = step / _radius * 180 / Math.PI;
                bool improved = false;
                for (int parameter = shiftOnly ? 1 : 0; parameter < 3; parameter++)
                    foreach (int sign in (ReadOnlySpan<int>)[1, -1])
                    {
                        var q = parameter switch
                        {
                            0 => p with { Degrees = p.Degrees + sign * angleStep },
                            1 => p with { Dx = p.Dx + sign * step },
                            _ => p with { Dy = p.Dy + sign * step },
                        };
                        double score = Score(q, level, ref evaluations);
                        if (score > best) { best = score; p = q; improved = true; break; }
                    }
                if (!improved) step /= 2;
            }
            return p with { Degrees = Wrap(p.Degrees) };
        }

        public TemplateMatch Finish(Pose p, double? runnerUp, ref int evaluations)
        {
            var value = Measure(p, 0, ref evaluations);
            double similarity = value.Normalised - 1;
            double baseline = 0;
            foreach (double turn in (ReadOnlySpan<double>)[90, 180, 270])
                baseline = Math.Max(baseline, Score(p with { Degrees = p.Degrees + turn }, Math.Min(1, Levels.Count - 1), ref evaluations) - 1);
            double confidence = similarity > 0 ? Math.Clamp(2 * (1 - baseline / similarity), 0, 1) : 0;
            return new TemplateMatch(ToTransform(p), similarity, value.MutualInformation, confidence, p.Mirrored, runnerUp, value.Samples, evaluations);
        }
    }

    private static double Wrap(double degrees) => Angles.Wrap(degrees);

    /// <summary>2×2 block means (an odd last row or column is dropped); pixel centres follow <see cref="Resampler.FullToBlockReduced"/>.</summary>
    internal static GrayImage Reduce(GrayImage image)
    {
        int w = Math.Max(1, image.Width / 2), h = Math.Max(1, image.Height / 2);
        var result = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        {
            var r0 = image.Row(Math.Min(2 * y, image.Height - 1));
            var r1 = image.Row(Math.Min(2 * y + 1, image.Height - 1));
            var dst = result.Row(y);
            for (int x = 0; x < w; x++)
            {
                int x0 = Math.Min(2 * x, image.Width - 1), x1 = Math.Min(2 * x + 1, image.Width - 1);
                dst[x] = 0.25f * (r0[x0] + r0[x1] + r1[x0] + r1[x1]);
            }
        }
        return result;
    }

    /// <summary>The tissue pixels: those that differ from the background (the median of the border pixels) by more than a fifth of the robust range, whichever way the contrast runs.</summary>
    private static IEnumerable<(int X, int Y)> TissuePixels(GrayImage image, (double Low, double High) range)
    {
        double background = image.BorderMedian(), threshold = 0.2 * (range.High - range.Low);
        for (int y = 0; y < image.Height; y++)
            for (int x = 0; x < image.Width; x++)
                if (Math.Abs(image[x, y] - background) > threshold) yield return (x, y);
    }

    /// <summary>
    /// Centre and radius (root mean square distance) of the tissue: pixels that differ from the background (the median of
    /// the border pixels) by more than a fifth of the robust range, whichever way the contrast runs. The image centre when none.
    /// </summary>
    internal static (double X, double Y) TissueCentre(GrayImage image, (double Low, double High) range, out double radius)
    {
        double sx = 0, sy = 0, sxx = 0, n = 0;
        foreach (var (x, y) in TissuePixels(image, range)) { sx += x; sy += y; sxx += (double)x * x + (double)y * y; n++; }
        if (n < 4)
        {
            radius = Math.Min(image.Width, image.Height) / 4.0;
            return ((image.Width - 1) / 2.0, (image.Height - 1) / 2.0);
        }
        double cx = sx / n, cy = sy / n;
        radius = Math.Sqrt(Math.Max(sxx / n - cx * cx - cy * cy, 1));
        return (cx, cy);
    }
}
