using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Series;
using StackBuild.Solve;
using StackBuild.Template;

namespace StackBuild.Pipeline;

/// <summary>The sections placed on a template: the fused placements (template plane pixels at working scale) and the record of how.</summary>
/// <param name="Z">Each prepared section's template plane (fractional index along the cut axis).</param>
/// <param name="FirstPlane">Template plane of the series' first section.</param>
/// <param name="Direction">+1 when section numbers run towards higher template planes, −1 reversed.</param>
/// <param name="PlaneToWork">Template plane pixels → working pixels (a scale).</param>
public sealed record TemplatePlacement(TemplateGuideResult Guide, double[] Z, double FirstPlane, double Direction, Transform2D PlaneToWork);

/// <summary>The template slice at each prepared section's depth (null where the template does not reach), all in one pixel frame.</summary>
/// <param name="Z">Each section's template plane (fractional index along the cut axis).</param>
/// <param name="SliceToPlane">Slice pixels → template plane pixels.</param>
public sealed record TemplateSlices(double[] Z, HeldImage?[] Slices, Transform2D SliceToPlane, double FirstPlane, double Direction);

public static class TemplateStage
{
    /// <summary>Below this share of agreeing sections in the global search, the build warns that the template may be set up wrongly.</summary>
    private const double MinTemplateAgreement = 0.5;

    /// <summary>
    /// With a template: every section matched to the template slice at its depth and the stack's course fused with the
    /// template's (<see cref="TemplateGuide"/>); the placements become template plane pixels at working scale. Without
    /// one, the placements are returned as they are.
    /// </summary>
    /// <param name="slices">The slices cut for the side decision (<see cref="Slice"/>), or null to cut them here.</param>
    /// <param name="scratch">Template matches searched from scratch for the side decision (<see cref="SideMatches"/>), reused.</param>
    public static Placements PlaceOnTemplate(SeriesPlan plan, PreparedSections sections, Placements placements, TemplateSlices? slices,
        IReadOnlyList<TemplateMatch?>? scratch, IProgress<string>? progress)
    {
        if (plan.Template is not { } template) return placements;
        var o = plan.Options.Template!;
        if (!placements.Aligned)
            throw new InputProblemException(o.Path, "--template needs aligned sections (it cannot be combined with --no-align or used on one section)",
                "leave out --no-align, or build without --template");
        var chain = placements.Chain;
        double workUm = sections.WorkPixelUm;
        double[]? sideMargin = placements.Parity?.Margin;
        slices ??= Slice(plan, sections, progress)!;
        var (z, sliceToPlane, firstPlane, direction) = (slices.Z, slices.SliceToPlane, slices.FirstPlane, slices.Direction);
        progress?.Report("template: matching sections to their slices");
        var (across, acrossError) = Boundaries(chain);
        var guide = TemplateGuide.Place(new TemplateGuideInput(sections.Sections.Select((w, n) => new TemplateGuideSection(
            z[n], w.Held, chain[n].ToReference, slices.Slices[n], across[n], OwnLinkConfidence: chain[n].Pair?.Confidence ?? 1,
            ChainFailed: chain[n].Route == LinkRoute.Failed,
            Unanchored: chain[n].Route != LinkRoute.Failed && chain[n].Part != 0,
            SideUncertain: sideMargin is not null && sideMargin[n] < MirrorParity.UncertainMargin,
            LinkErrorPx: acrossError[n], Scratch: scratch?[n], LinkedTo: chain[n].LinkedTo >= 0 ? chain[n].LinkedTo : null,
            OwnRouteDisagreementPx: chain[n].AnyRouteDisagreement)).ToList(), GuideOptions));
        var planeToWork = Transform2D.Scale(template.PixelWidthMm * 1000 / workUm, template.PixelHeightMm * 1000 / workUm);
        // A section the chain could not place takes its own template match when the guide accepted it (route 'template'); one
        // in a part of the chain that neither the chain nor the template could put anywhere is left out (route 'failed').
        var fused = chain.Select((c, n) => c.Route == LinkRoute.Failed
            ? guide.Sections[n].PlacedByTemplate
                ? new ChainPlacement(guide.Sections[n].SectionToSlice.Then(sliceToPlane).Then(planeToWork), LinkRoute.Template, -1, null, null, 0)
                : c
            : guide.Sections[n].Unplaced ? c with { Route = LinkRoute.Failed, LinkedTo = -1 }
            : c with { ToReference = guide.Sections[n].SectionToSlice.Then(sliceToPlane).Then(planeToWork) }).ToList();
        var before = chain.Select((c, n) => c.Route == LinkRoute.Failed ? c
            : c with { ToReference = guide.Sections[n].ChainToSlice.Then(sliceToPlane).Then(planeToWork) }).ToList();

        var warnings = placements.Warnings.ToList();
        if (guide.MeasuredCount == 0)
            warnings.Add("no section could be matched to its template slice; the sections follow the neighbour chain only — check --template-axis and --template-first-plane");
        else if (guide.GlobalAgreement < MinTemplateAgreement)
            warnings.Add($"the sections agree poorly on where the stack lies on the template (global agreement {guide.GlobalAgreement:0.00}, " +
                $"expected above {MinTemplateAgreement:0.0}): the cut axis, first plane or direction may be wrong — check --template-axis, --template-first-plane and --template-reverse, and the template-match column of the report");
        return placements with
        {
            Chain = fused,
            ChainBefore = before,
            Warnings = warnings,
            OnTemplate = new TemplatePlacement(guide, z, firstPlane, direction, planeToWork),
        };
    }

    /// <summary>
    /// The template slice at each section's depth; null without a template. Section depth: template plane = first plane ±
    /// (position − first position) / plane spacing.
    /// </summary>
    public static TemplateSlices? Slice(SeriesPlan plan, PreparedSections sections, IProgress<string>? progress)
    {
        if (plan.Template is not { } template) return null;
        var o = plan.Options.Template!;
        double workUm = sections.WorkPixelUm;
        var (firstPlane, direction) = TemplateDepths(template, o, plan.Series);
        double first = plan.Series.Sections[0].PositionUm, perUm = 1 / 1000.0 / template.PlaneSpacingMm;
        var z = sections.Sections.Select(w => firstPlane + direction * (w.Entry.PositionUm - first) * perUm).ToArray();
        int inside = z.Count(template.ContainsPlane);
        var slices = new HeldImage?[sections.Count];   // kept with the working images (on disk for a long series)
        var sliceToPlane = Transform2D.Identity;
        object gate = new();
        int done = 0;
        Parallel.For(0, sections.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            if (!template.ContainsPlane(z[n])) return;
            slices[n] = sections.Spill.Hold(template.Slice(z[n], workUm / 1000, out var map));
            lock (gate) sliceToPlane = map;
            progress?.Report($"template: slice {Interlocked.Increment(ref done)}/{inside}");
        });
        return new TemplateSlices(z, slices, sliceToPlane, firstPlane, direction);
    }

    /// <summary>The guide's settings (the build uses the defaults).</summary>
    private static readonly TemplateGuideOptions GuideOptions = new();

    /// <summary>Sections spread over the stack whose template matches say how the series' face up looks on the template.</summary>
    public const int SideVoteSample = 12;

    /// <summary>A section whose side margin from the pairs is below this also has its side put to the template's vote.</summary>
    public const double SideVoteMargin = 0.25;

    /// <summary>
    /// Weight of the template's side vote against the pairs' evidence (weighted Fisher z): the vote is this times the
    /// relative lead of the better mirror's similarity, (s_better − s_other) / s_better. On the development cuts
    /// (docs/accuracy.md) every vote of a section with similarity above the guide's floor was right, leads 0.03–0.09 on
    /// the nearly symmetric macaque template and 0.14–0.74 on the human head; 1 was not tuned further.
    /// </summary>
    public const double SideVoteWeight = 1.0;

    /// <summary>
    /// Template matches from scratch, with both mirrors measured, of the sections whose side the pairs hardly decide (margin
    /// below <see cref="SideVoteMargin"/>) and of <see cref="SideVoteSample"/> sections spread over the stack (which settle
    /// whether face up looks mirrored on the template); null elsewhere.
    /// </summary>
    public static TemplateMatch?[] SideMatches(PreparedSections sections, TemplateSlices slices, ParityResult parity, IProgress<string>? progress)
    {
        var with = Enumerable.Range(0, sections.Count).Where(n => slices.Slices[n] is not null).ToList();
        var chosen = new SortedSet<int>(with.Where(n => parity.Margin[n] < SideVoteMargin));
        int count = Math.Min(SideVoteSample, with.Count);
        for (int t = 0; t < count; t++) chosen.Add(with[(int)Math.Round((t + 0.5) * with.Count / count - 0.5)]);
        progress?.Report($"template: {chosen.Count} sections matched from scratch for which side is up");
        // The guide's own registration settings, so that the guide can reuse these matches as its searches from scratch.
        var options = GuideOptions.Registration with { MeasureOtherMirror = true };
        var matches = new TemplateMatch?[sections.Count];
        Parallel.ForEach(chosen, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount },
            n => matches[n] = TemplateRegistration.Register(sections[n].Image, slices.Slices[n]!.Load(), null, options));
        return matches;
    }

    /// <summary>A template match's vote on its section's side; null when neither mirror matches (similarity below the guide's floor).</summary>
    public static SideVote? SideVoteOf(TemplateMatch m)
    {
        double best = m.Similarity, other = m.OtherMirrorSimilarity ?? best;
        if (Math.Max(best, other) < GuideOptions.MinSimilarity) return null;
        double lead = SideVoteWeight * (best - other) / Math.Max(best, other);
        return m.Mirrored ? new SideVote(0, lead) : new SideVote(lead, 0);
    }

    /// <summary>
    /// For each section, the chain across the boundary between it and the placed section before it in stack order: the lowest
    /// confidence and the largest likely error (working pixels, from the link's two routes' disagreement: each route errs, the
    /// difference has √2 times their spread; null when unknown) of the pair links that cross that boundary (each section's
    /// link to the one it was registered to). Below the reference a section is registered to the one after it, so its own
    /// link describes the boundary after it, not before (taken as the boundary before, a weak link 17 → 19 made the template
    /// guide split the stack between 16 and 17 and move 17 with the wrong side: the whole head, seed 1, 4.7 px). Confidence 0
    /// where a new part of the chain begins; 1 for the first placed section and for sections the chain did not place.
    /// </summary>
    internal static (double[] Confidence, double?[] ErrorPx) Boundaries(IReadOnlyList<ChainPlacement> chain)
    {
        var confidence = new double[chain.Count];
        var error = new double?[chain.Count];
        int previous = -1;
        for (int n = 0; n < chain.Count; n++)
        {
            confidence[n] = 1;
            if (chain[n].Route == LinkRoute.Failed) continue;
            if (previous >= 0)
            {
                if (PartEdge(chain, n)) confidence[n] = 0;
                for (int j = 0; j < chain.Count; j++)
                {
                    var c = chain[j];
                    if (c.Route == LinkRoute.Failed || c.LinkedTo < 0) continue;
                    if (!((j <= previous && c.LinkedTo >= n) || (j >= n && c.LinkedTo <= previous))) continue;
                    confidence[n] = Math.Min(confidence[n], c.Pair?.Confidence ?? 1);
                    if (c.AnyRouteDisagreement is double d) error[n] = Math.Max(error[n] ?? 0, d / Math.Sqrt(2));
                }
            }
            previous = n;
        }
        return (confidence, error);
    }

    /// <summary>True where section <paramref name="n"/> belongs to another part of the chain than the placed section before it.</summary>
    private static bool PartEdge(IReadOnlyList<ChainPlacement> chain, int n)
    {
        if (chain[n].Route == LinkRoute.Failed) return false;
        for (int j = n - 1; j >= 0; j--)
            if (chain[j].Route != LinkRoute.Failed) return chain[j].Part != chain[n].Part;
        return false;
    }

    /// <summary>
    /// The template plane of the first section and the direction of increasing section numbers. Default first plane:
    /// the series centred on the template along the cut axis (rounded to a whole plane with --template-grid, so the
    /// volume's planes fall on the template's).
    /// </summary>
    internal static (double FirstPlane, double Direction) TemplateDepths(TemplateVolume template, TemplateOptions o, SectionSeries series)
    {
        double first = series.Sections[0].PositionUm, last = series.Sections.Max(s => s.PositionUm);
        double direction = o.Reverse ? -1 : 1;
        double centred = (template.Planes - 1) / 2.0 - direction * (last - first) / 1000 / template.PlaneSpacingMm / 2;
        return (o.FirstPlane ?? (o.TemplateGrid ? Math.Round(centred) : centred), direction);
    }
}
