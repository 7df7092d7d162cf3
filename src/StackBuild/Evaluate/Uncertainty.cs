using System.Globalization;
using StackBuild.Pipeline;
using StackBuild.Solve;

namespace StackBuild.Evaluate;

/// <summary>One section's estimated placement error.</summary>
/// <param name="LinkUm">Standard error (µm) of the one registration that tied the section to the section it was registered to.</param>
/// <param name="AccumulatedUm">Standard error (µm) of the section's placement: the link errors summed along the chain as a random walk
/// (without a template, as one global fit sees that walk, plus the drift term; with one, relative to the template).</param>
public sealed record SectionUncertainty(int Number, double LinkUm, double AccumulatedUm);

/// <summary>
/// An estimate, from the build record alone (no ground truth), of how far each section may lie from where it
/// should. It is a heuristic error budget, not a calibrated confidence interval: see docs/uncertainty.md for
/// how well it tracks the true error on the demo phantom.
/// </summary>
/// <remarks>
/// Each link (a section registered to a neighbour) contributes three independent terms, added in quadrature:
/// <list type="bullet">
/// <item>peak localisation: one registration pixel divided by √(peak-to-sidelobe ratio), so a sharp
/// phase-correlation peak gives a fraction of a pixel and a blunt one about a pixel;</item>
/// <item>route disagreement: when the placements through the first and the second neighbour differ by d, each
/// is taken to be off by d/√2 (two estimates of equal variance);</item>
/// <item>gross-error risk: (1 − confidence) × <see cref="GrossErrorFraction"/> of the volume's in-plane extent,
/// for a close call between hypotheses that may have picked the wrong one.</item>
/// </list>
/// Errors of successive links are taken as independent, so variances add along the chain from the reference
/// (a random walk; common practice for chained pairwise registration); without a template the walk is taken as one global
/// fit sees it, about the stack's mean (<see cref="WalkAboutMean"/>). A build guided by a template replaces the
/// walk by <see cref="TemplateError"/>: each section's error is then relative to the template, not the reference; a
/// section carried with one its own template match placed takes that match's error, the registrations in between
/// (<see cref="CarriedLinks"/>) and its own misfit there.
/// </remarks>
public static class Uncertainty
{
    /// <summary>Share of the in-plane extent charged per unit of missing confidence.</summary>
    public const double GrossErrorFraction = 0.05;

    /// <summary>
    /// Every placed section's estimate, by section number. Sections that were not placed (gaps, excluded,
    /// failed) have none, nor has any section of an unaligned build (its placement is not a registration). A section whose chain cannot be followed back to the reference (a record edited by hand)
    /// gets its link error only.
    /// </summary>
    public static IReadOnlyDictionary<int, SectionUncertainty> Estimate(BuildRecord record)
    {
        if (!record.Aligned) return new Dictionary<int, SectionUncertainty>();
        double pixelUm = RegistrationPixelUm(record);
        double extentUm = record.Dimensions.Length >= 2 && record.VoxelSizeMm.Length >= 2
            ? Math.Max(record.Dimensions[0] * record.VoxelSizeMm[0], record.Dimensions[1] * record.VoxelSizeMm[1]) * 1000
            : 0;
        var placed = record.Sections.Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed).ToDictionary(s => s.Number);
        var link = placed.Values.ToDictionary(s => s.Number, s => LinkError(s, pixelUm, extentUm));
        var result = new Dictionary<int, SectionUncertainty>();
        // The slow drift of a chain with no template, by stack position among the placed sections (see DriftError).
        bool guided = record.Sections.Any(s => s.Template is not null);
        // Every placed section counts, those of a part joined by a weak match too: the stack drifts over its whole length.
        var order = guided ? [] : placed.Values.OrderBy(s => s.ZIndex).Select(s => s.Number).ToList();
        var position = order.Select((number, t) => (number, t)).ToDictionary(x => x.number, x => x.t);
        var beyond = guided ? UncheckedLinks(placed.Values, link) : new Dictionary<int, double>();
        var paths = placed.Values.ToDictionary(s => s.Number, s => PathToReference(s, placed));
        var aboutMean = guided ? new Dictionary<int, double>() : WalkAboutMean(paths, link);
        foreach (var s in placed.Values)
        {
            // The links from the section to the reference, their errors added as a random walk; without a template, as one
            // global fit sees that walk (about the stack's mean: WalkAboutMean), so the reference's own estimate is not zero.
            double variance = aboutMean.TryGetValue(s.Number, out double v) ? v : paths[s.Number].Sum(k => link[k] * link[k]);
            // With a template the chain no longer accumulates: the course is the template's, known as well as the
            // template matches around the section agree with the fused placements.
            if (s.Template is { PlacedByTemplate: true } && TemplateError(s, record.Sections, single: true) is double ownUm)
                variance = ownUm * ownUm; // placed by one template match alone: no chain link, no averaging over neighbours
            else if (s.Template is { CarriedWith: int anchor } && TemplateError(s, record.Sections, single: true) is double anchorUm
                     && CarriedLinks(paths[s.Number], anchor, placed, pixelUm, extentUm) is double linksVariance)
                variance = anchorUm * anchorUm + linksVariance + Math.Pow(s.Template.MisfitUm ?? 0, 2);
            else if (s.Template is not null && TemplateError(s, record.Sections) is double templateUm)
                variance = link[s.Number] * link[s.Number] + templateUm * templateUm + beyond.GetValueOrDefault(s.Number);
            if (position.TryGetValue(s.Number, out int at0))
            {
                double drift = DriftError(at0, order.Count - 1) * pixelUm;
                variance += drift * drift;
            }
            // A part the chain could not link to the reference has no known place without a template: no estimate.
            if (s.Part is not null && s.Template is null) continue;
            result[s.Number] = new SectionUncertainty(s.Number, link[s.Number], Math.Sqrt(variance));
        }
        return result;
    }

    /// <summary>
    /// The sections whose links lead from <paramref name="section"/> to its reference (itself first, the reference last: each
    /// section stands for its own link to the one it was registered to). A loop or a missing parent ends the walk (only
    /// possible in an edited record); the path is then marked as not reaching a reference by its last section's route.
    /// </summary>
    private static List<int> PathToReference(SectionRecord section, IReadOnlyDictionary<int, SectionRecord> placed)
    {
        var path = new List<int>();
        var visited = new HashSet<int>();
        for (var at = section; visited.Add(at.Number);)
        {
            path.Add(at.Number);
            if (at.RegisteredTo is not int parent || !placed.TryGetValue(parent, out var next)) break;
            at = next;
        }
        return path;
    }

    /// <summary>
    /// Without a template, each section's chain walk as one global fit sees it: the variance of W(i) − mean W over the
    /// sections of its tree (those that reach the same reference), where W(i) is the sum of the independent link errors
    /// e_k on the path from i to the reference. With s_k the share of the tree's sections whose path holds link k,
    /// W(i) − mean W = Σ_k e_k (1[k on i's path] − s_k), so Var = Σ_k v_k (1[k on i's path] − s_k)² (error propagation for
    /// a sum of independent terms; common practice). The reference's estimate is then no longer zero — after a global fit
    /// it is as likely to be off as its neighbours (the issue this answers: a chain's reference 24 px off with an estimate
    /// of 0 µm; inia19-NeuroMaps' reference, 6 px off and the only section of its plain build more than 2 px off left
    /// unflagged on every seed, docs/accuracy.md) — and sections far out are charged less for the links near the reference,
    /// which the fit shares out over the whole stack.
    /// </summary>
    internal static Dictionary<int, double> WalkAboutMean(IReadOnlyDictionary<int, List<int>> paths, IReadOnlyDictionary<int, double> link)
    {
        var result = new Dictionary<int, double>();
        foreach (var tree in paths.GroupBy(p => p.Value[^1]))
        {
            var members = tree.ToList();
            var share = new Dictionary<int, double>();
            foreach (var (_, path) in members)
                foreach (int k in path) share[k] = share.GetValueOrDefault(k) + 1.0 / members.Count;
            foreach (var (number, path) in members)
            {
                var on = path.ToHashSet();
                double variance = 0;
                foreach (var (k, sk) in share)
                {
                    double d = (on.Contains(k) ? 1 : 0) - sk;
                    variance += link[k] * link[k] * d * d;
                }
                result[number] = variance;
            }
        }
        return result;
    }

    /// <summary>
    /// The slow drift of a chain with no template to check its course, per link, in registration pixels: the links' errors
    /// are not independent noise but follow the tissue (neighbouring links err alike; DriftCorrectionTests), so the stack
    /// bends slowly by far more than the links' own errors add up to. Measured on the development series of
    /// docs/accuracy.md (public MRI volumes cut whole, seed 1: drift rms 2–5 px over 59–86 sections) and the demo
    /// (2.4 px over 60): about one pixel per link in the model of <see cref="DriftError"/>. A rule of this project,
    /// checked on the held-out series, not a published value.
    /// </summary>
    public const double DriftPxPerLink = 1.0;

    /// <summary>
    /// The drift part of a section's error (registration pixels) in a build with no template, at position
    /// <paramref name="t"/> of <paramref name="links"/> + 1 placed sections: a random walk of <see cref="DriftPxPerLink"/>
    /// per link seen after the one global fit that compares a build with anything outside it, which pins the stack's mean.
    /// For a random walk W over [0, N], Var(W(t) − mean W) = N/3 − t + t²/N: N/12 in the middle, N/3 at either end (a
    /// property of Brownian motion; derived here, common practice in error propagation). Zero for a single section.
    /// </summary>
    public static double DriftError(int t, int links)
    {
        if (links <= 0) return 0;
        double variance = links / 3.0 - t + (double)t * t / links;
        return DriftPxPerLink * Math.Sqrt(Math.Max(0, variance));
    }

    /// <summary>
    /// In a template-guided build, for each placed section whose own template match was not used: the variance (µm²) of
    /// the chain links between it and the nearest section whose match was used, on the nearer side in those terms (the
    /// links strictly between the two; the section's own link is counted anyway). The template's course reaches such a
    /// section only through those links, so their errors add as in the chain's random walk (natbrainlab's last section,
    /// three links past the last used match, was 5.4 px off with an estimate of 0.45 px before).
    /// </summary>
    internal static Dictionary<int, double> UncheckedLinks(IEnumerable<SectionRecord> placed, IReadOnlyDictionary<int, double> link)
    {
        var order = placed.OrderBy(s => s.ZIndex).ToList();
        bool Used(SectionRecord s) => s.Template is { Matched: true, Outlier: null, PlacedByTemplate: false };
        var result = new Dictionary<int, double>();
        for (int i = 0; i < order.Count; i++)
        {
            if (Used(order[i]) || order[i].Template is null) continue;
            double Side(int step)
            {
                double sum = 0;
                for (int j = i + step; j >= 0 && j < order.Count; j += step)
                {
                    if (Used(order[j])) return sum;
                    sum += link[order[j].Number] * link[order[j].Number];
                }
                return double.PositiveInfinity;
            }
            double nearer = Math.Min(Side(-1), Side(1));
            if (double.IsFinite(nearer)) result[order[i].Number] = nearer;
        }
        return result;
    }

    /// <summary>
    /// The variance (µm²) of the registrations that carried a section with the section <paramref name="anchor"/> that its own
    /// template match placed (<see cref="SectionTemplateRecord.CarriedWith"/>): each link's peak and gross-error terms from
    /// the section up to the anchor. Their route disagreements are left out: the carry went through these registrations
    /// alone, not through the second-neighbour routes, and the disagreement that marked the chain wrong there (ch2 j, seed
    /// 53: 392 px at the link the template rescued) is what the carry undid. The caller adds the anchor's single-match
    /// error and the misfit of the match searched from the carried placement, which checks the carry directly. Null when
    /// the section's path to the reference (<see cref="PathToReference"/>) does not pass the anchor (an edited record).
    /// </summary>
    internal static double? CarriedLinks(List<int> path, int anchor, IReadOnlyDictionary<int, SectionRecord> placed, double pixelUm, double extentUm)
    {
        int at = path.IndexOf(anchor);
        if (at < 0) return null;
        return path.Take(at).Sum(k => { double e = LinkError(placed[k] with { RouteDisagreementUm = null }, pixelUm, extentUm); return e * e; });
    }

    /// <summary>Sections on either side whose template matches set the course at a section (the fusion's window, 11 sections).</summary>
    public const int TemplateHalfWindow = 5;

    /// <summary>
    /// Standard error (µm) of a template-guided section's course: the RMS misfit between the template matches and
    /// the fused placements within ±<see cref="TemplateHalfWindow"/> sections, divided by √(number of those matches)
    /// (the local fit averages them). Null when no match nearby was used (then the chain's random walk stands).
    /// With <paramref name="single"/> (a section placed by its own template match alone) the RMS misfit itself: the
    /// error of one match, not of an average.
    /// </summary>
    public static double? TemplateError(SectionRecord section, IReadOnlyList<SectionRecord> all, bool single = false)
    {
        var misfits = all.Where(o => o.Template is { Matched: true, Outlier: null, MisfitUm: not null, PlacedByTemplate: false }
                                     && Math.Abs(o.ZIndex - section.ZIndex) <= TemplateHalfWindow)
            .Select(o => o.Template!.MisfitUm!.Value).ToList();
        if (misfits.Count == 0) return null;
        return Math.Sqrt(misfits.Average(m => m * m) / (single ? 1 : misfits.Count));
    }

    /// <summary>The record with <see cref="SectionRecord.EstimatedErrorUm"/> filled in for every placed section.</summary>
    public static BuildRecord Annotate(BuildRecord record)
    {
        var estimates = Estimate(record);
        return record with
        {
            Sections = record.Sections
                .Select(s => s with { EstimatedErrorUm = estimates.TryGetValue(s.Number, out var e) ? Math.Round(e.AccumulatedUm, 2) : null })
                .ToList(),
        };
    }

    /// <summary>The standard error (µm) of one link; 0 for the reference and for unaligned placement.</summary>
    public static double LinkError(SectionRecord section, double pixelUm, double extentUm)
    {
        if (section.Route is LinkRoute.Reference || section.Confidence is null) return 0;
        double psr = Math.Max(1, section.PeakToSidelobe ?? 1);
        double peak = pixelUm / Math.Sqrt(psr);
        double route = (section.RouteDisagreementUm ?? 0) / Math.Sqrt(2);
        double gross = (1 - Math.Clamp(section.Confidence.Value, 0, 1)) * GrossErrorFraction * extentUm;
        return Math.Sqrt(peak * peak + route * route + gross * gross);
    }

    /// <summary>The pixel size (µm) at which sections were registered, from the run parameters, else the output voxel size.</summary>
    public static double RegistrationPixelUm(BuildRecord record)
    {
        if (record.Parameters.RegistrationPixelSizeUm is var um && um > 0)
            return um;
        return record.VoxelSizeMm.Length > 0 ? record.VoxelSizeMm[0] * 1000 : record.InputPixelSizeUm;
    }

    /// <summary>
    /// Spearman's rank correlation (Spearman 1904, Am J Psychol 15:72): Pearson's correlation of the ranks,
    /// ties given their mean rank. NaN for fewer than two pairs or when either side is constant.
    /// </summary>
    public static double Spearman(IReadOnlyList<double> a, IReadOnlyList<double> b)
    {
        if (a.Count != b.Count) throw new ArgumentException("Spearman needs two lists of the same length.");
        if (a.Count < 2) return double.NaN;
        var ra = Ranks(a);
        var rb = Ranks(b);
        double ma = ra.Average(), mb = rb.Average(), sab = 0, saa = 0, sbb = 0;
        for (int i = 0; i < ra.Length; i++)
        {
            sab += (ra[i] - ma) * (rb[i] - mb);
            saa += (ra[i] - ma) * (ra[i] - ma);
            sbb += (rb[i] - mb) * (rb[i] - mb);
        }
        return saa == 0 || sbb == 0 ? double.NaN : sab / Math.Sqrt(saa * sbb);
    }

    private static double[] Ranks(IReadOnlyList<double> values)
    {
        var order = Enumerable.Range(0, values.Count).OrderBy(i => values[i]).ToArray();
        var ranks = new double[values.Count];
        for (int start = 0; start < order.Length;)
        {
            int end = start;
            while (end + 1 < order.Length && values[order[end + 1]] == values[order[start]]) end++;
            double mean = (start + end) / 2.0 + 1;
            for (int t = start; t <= end; t++) ranks[order[t]] = mean;
            start = end + 1;
        }
        return ranks;
    }
}
