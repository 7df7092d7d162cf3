using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Template;

/// <summary>One section as the template guide sees it.</summary>
/// <param name="Z">Fractional template plane index of the section.</param>
/// <param name="Image">The section at working size, or null for a gap (it is placed by the chain and the smoothed correction only).</param>
/// <param name="ToReference">Section working pixels to the reference frame's working pixels, from the neighbour chain.</param>
/// <param name="Slice">The template slice at <paramref name="Z"/>, at the working pixel size; null when the template does not reach it.
/// All slices must share one pixel frame (cut from one template at one pixel size).</param>
/// <param name="ChainConfidence">How far the chain can be trusted across the boundary between this section and the previous one
/// (the confidence of the weakest pair link crossing it; 1 for the first): where the stack is split into separately
/// corrected stretches.</param>
/// <param name="OwnLinkConfidence">Confidence of the pair link that placed this section (to whichever neighbour); null = the
/// same as <paramref name="ChainConfidence"/>. A section hanging on a weak link of its own is searched from scratch.</param>
/// <param name="ChainFailed">The chain could not place the section (<paramref name="ToReference"/> means nothing); it is
/// searched on its slice from scratch and placed by that match alone when the match is as good as its neighbours'.</param>
/// <param name="LinkErrorPx">How far off the chain link from this section to the one before may be (working pixels, one standard
/// deviation at the image corners; from the disagreement of its first- and second-neighbour routes); null when unknown. With it
/// the course follows the template closely where the chain is weak (the small, fast-changing end sections of a specimen) and
/// smooths over many sections where it is strong.</param>
/// <param name="Unanchored">The chain placed the section in a part of the stack that nothing links to the reference
/// (<paramref name="ToReference"/> holds within the part only): its template match is searched from scratch, and its part
/// must begin a new run (a <paramref name="ChainConfidence"/> of 0 at the part's first section and after its last).</param>
/// <param name="SideUncertain">The pairs could hardly tell which side of the section is up (a nearly symmetric end of the
/// specimen): its template match searched from scratch decides the side when it is as good as its neighbours' and better
/// than the match with the chain's side.</param>
/// <param name="Scratch">The section's match to its slice searched from scratch, when one was already made (for the side
/// decision); used instead of searching again.</param>
/// <param name="LinkedTo">Index of the section this one's chain placement hangs on (the one it was registered to); null for the
/// reference, a failed section or when unknown. A section placed by its own template match carries the sections hanging on it
/// whose own matches were set aside.</param>
/// <param name="OwnRouteDisagreementPx">How far apart (working pixels) the section's placements through its first and second
/// neighbour lie, trusted or not; null with fewer than two routes. Beyond <see cref="TemplateGuideOptions.LooseLinkPx"/> the
/// section's own link is as doubtful as a weak one: a weak template match of it is searched again from scratch.</param>
public sealed record TemplateGuideSection(double Z, HeldImage? Image, Transform2D ToReference, HeldImage? Slice, double ChainConfidence = 1,
    bool ChainFailed = false, double? LinkErrorPx = null, bool Unanchored = false, bool SideUncertain = false, TemplateMatch? Scratch = null,
    double? OwnLinkConfidence = null, int? LinkedTo = null, double? OwnRouteDisagreementPx = null)
{
    /// <summary>Confidence of the link that placed this section.</summary>
    public double OwnConfidence => OwnLinkConfidence ?? ChainConfidence;
}

public sealed record TemplateGuideOptions
{
    /// <summary>Width, in sections, over which the template decides the course of the stack (the smoothing window of the correction).</summary>
    public int SmoothingSections { get; init; } = 11;
    /// <summary>Sections, spread over the stack, searched globally (any angle, both mirrors) to find the reference-to-template map.</summary>
    public int GlobalSampleSections { get; init; } = 12;
    /// <summary>Two global candidates agree when their angles are this close…</summary>
    public double AgreementDegrees { get; init; } = 6;
    /// <summary>…and they put the reference frame's points this close, as a fraction of the slice's shorter side.</summary>
    public double AgreementFraction { get; init; } = 0.05;
    /// <summary>A measurement whose similarity is below this is not used (normalised MI − 1).</summary>
    public double MinSimilarity { get; init; } = 0.02;
    /// <summary>
    /// A measurement whose confidence is below this is not used. Off by default: the registration's confidence measures
    /// how distinct the match is from the section turned by 90°, which is low for round specimens even when the match is
    /// right; started from the chain, a wrong turn is caught by the deviation test instead.
    /// </summary>
    public double MinConfidence { get; init; } = 0;
    /// <summary>Outlier threshold: deviation from the local median course beyond this many robust standard deviations (1.4826·MAD)…</summary>
    public double OutlierMads { get; init; } = 4;
    /// <summary>…and beyond this floor (pixels at working size, degrees), so that a very tidy series does not reject by noise.</summary>
    public double OutlierFloorPx { get; init; } = 2;
    public double OutlierFloorDegrees { get; init; } = 2;
    /// <summary>
    /// Sections whose template match was set aside, or whose chain link is below this confidence, are also searched on
    /// their slice from scratch (any angle, both mirrors); see <see cref="RescueSimilarityShare"/>.
    /// </summary>
    public double RescueChainConfidence { get; init; } = 0.5;
    /// <summary>
    /// Such a section is placed by that match alone when its similarity is at least this share of the median similarity
    /// of the accepted matches within the smoothing window (a section stained differently matches less well: one with a
    /// non-monotone change of contrast, in the MRI series of the tests, reached 0.67 of its neighbours' and was placed
    /// 0.06 px from the truth)…
    /// </summary>
    public double RescueSimilarityShare { get; init; } = 0.5;
    /// <summary>
    /// …and, for a section the chain could not place, at least this many times the similarity of the best distinct
    /// candidate of its search (another angle or the other mirror; that section: 1.56; the demo's torn section 4, whose
    /// mirror the match cannot tell: 1.02)…
    /// </summary>
    public double RescueDistinctMargin { get; init; } = 1.1;
    /// <summary>…or, for a section the chain did place, this many times the similarity of its match near the chain placement
    /// (MRI simulation: 1.8–1.9 for a turned or mirrored section; demo section 4: 1.06).</summary>
    public double RescueMargin { get; init; } = 1.1;
    /// <summary>
    /// A section whose two routes (first and second neighbour) disagree by more than this (working pixels) hangs on a link as
    /// doubtful as one below <see cref="RescueChainConfidence"/>: when its match near the chain placement is weak (below
    /// <see cref="RescueSimilarityShare"/> of its neighbours'), it too is searched from scratch. (The whole head's second
    /// section, seed 67: link confidence 0.53, routes 392 px apart, match 0.10 against its neighbours' 0.27, chained 156 px off.)
    /// </summary>
    public double LooseLinkPx { get; init; } = 10;
    /// <summary>A chain link below this confidence separates the stack into parts whose corrections are smoothed apart.</summary>
    /// <remarks>So does a step in the template corrections larger than <see cref="StepPx"/> or <see cref="StepDegrees"/>
    /// (a wrong chain link that every later section inherits).</remarks>
    public double ChainBreakConfidence { get; init; } = 0.1;
    /// <summary>A step in the corrections (lines through the sections on either side, carried to the link) beyond this is a break in the chain (pixels at working size)…</summary>
    public double StepPx { get; init; } = 4;
    /// <summary>…or beyond this (degrees).</summary>
    public double StepDegrees { get; init; } = 4;
    public TemplateRegistrationOptions Registration { get; init; } = new();
}

public sealed record TemplateGuideInput(IReadOnlyList<TemplateGuideSection> Sections, TemplateGuideOptions? Options = null);

/// <summary>One section's placement on the template.</summary>
/// <param name="SectionToSlice">Fused: the chain placement moved by the smoothed template correction.</param>
/// <param name="ChainToSlice">The chain placement alone: ToReference then ReferenceToSlice.</param>
/// <param name="Measured">The section's own template match, or null (gap, no slice, or not registered).</param>
/// <param name="ResidualPx">Distance at the section centre between the measurement and the chain placement, slice pixels.</param>
/// <param name="ResidualDegrees">Angle of the measurement relative to the chain placement.</param>
/// <param name="DeviationPx">Distance of the measured correction from the local course (what outliers are judged by), at the
/// stack's common pivot.</param>
/// <param name="CorrectionDegrees">Rotation applied to the chain placement.</param>
/// <param name="CorrectionX">How far the correction moves the section centre, slice pixels.</param>
/// <param name="PlacedByTemplate">True when the section was placed by its own template match alone (searched from scratch),
/// not by the chain; <paramref name="Reason"/> then says why.</param>
/// <param name="Unplaced">True when nothing placed the section: it lies in a part of the chain that nothing links to the
/// reference (<see cref="TemplateGuideSection.Unanchored"/>) and no template match in that part was accepted, so where the
/// part lies is unknown; <paramref name="Reason"/> says so.</param>
/// <param name="CarriedFrom">Index of the section placed by its own template match that this one was carried with, through its
/// chain link (<see cref="TemplateGuideSection.LinkedTo"/>, possibly over several links); null otherwise.</param>
/// <param name="CarriedCheck">For a carried section, its template match searched from the carried placement (what the carry was
/// checked with; how far it lies from the carried placement is the section's misfit); null otherwise.</param>
public sealed record TemplateSectionPlacement(int Index, Transform2D SectionToSlice, Transform2D ChainToSlice, Transform2D? Measured,
    double? Similarity, double Confidence, double? ResidualPx, double? ResidualDegrees, double? DeviationPx, double? DeviationDegrees,
    bool Outlier, string? Reason, double CorrectionDegrees, double CorrectionX, double CorrectionY, bool PlacedByTemplate = false, bool Unplaced = false,
    int? CarriedFrom = null, Transform2D? CarriedCheck = null);

/// <param name="ReferenceToSlice">The one rigid map from the reference frame onto the template slices' frame.</param>
/// <param name="GlobalAgreement">Fraction of the globally searched sections that agreed with the chosen map.</param>
/// <param name="ChainSteps">Sections (indices) where the template's corrections step: the chain link from the section before is likely wrong.</param>
public sealed record TemplateGuideResult(IReadOnlyList<TemplateSectionPlacement> Sections, Transform2D ReferenceToSlice, bool Mirrored,
    double GlobalAgreement, int MeasuredCount, int OutlierCount, IReadOnlyList<int>? ChainSteps = null);

/// <summary>
/// Template-guided drift correction. The neighbour chain aligns each section well to the next but accumulates drift;
/// a template (an atlas or MRI volume of the same specimen kind) is registered to each section on its own, which does
/// not drift but is noisier and sometimes wrong. The guide keeps the chain's section-to-section detail and takes the
/// low-frequency course from the template: the difference between the template's placement and the chain's is
/// smoothed over <see cref="TemplateGuideOptions.SmoothingSections"/> sections (weighted local linear regression,
/// tricube weights; Cleveland 1979, J. Am. Stat. Assoc. 74:829) after outliers are rejected (deviation from a running
/// median beyond a multiple of the median absolute deviation; common practice), and applied to the chain.
/// </summary>
public static class TemplateGuide
{
    /// <summary>
    /// Places every section on the template: (a) the reference-to-template map from a consensus of globally searched
    /// sections, (b) each section registered to its slice from its chain placement, (c) outliers rejected with a reason,
    /// (d) the smoothed correction applied to the chain. Sections are taken in stack order. With no section that has
    /// both an image and a slice, the result keeps the chain placements under an identity map (GlobalAgreement 0).
    /// </summary>
    public static TemplateGuideResult Place(TemplateGuideInput input)
    {
        var options = input.Options ?? new TemplateGuideOptions();
        var sections = input.Sections;
        int n = sections.Count;
        if (n == 0) return new TemplateGuideResult([], Transform2D.Identity, false, 0, 0, 0);
        var centres = sections.Select(s => s.Image is { } im ? ((im.Width - 1) / 2.0, (im.Height - 1) / 2.0) : CentreOf(sections, s)).ToArray();
        var usable = Enumerable.Range(0, n).Where(i => sections[i].Image != null && sections[i].Slice != null && !sections[i].ChainFailed).ToList();
        var orphans = Enumerable.Range(0, n).Where(i => sections[i].Image != null && sections[i].Slice != null && sections[i].ChainFailed).ToList();

        // (a) The global map: sampled sections searched without a start; the candidate most others agree with, refitted on its agreeing set.
        var anchored = usable.Where(i => !sections[i].Unanchored).ToList();
        var (referenceToSlice, agreement) = GlobalMap(sections, anchored.Count > 0 ? anchored : usable, centres, options);

        // (b) Every section registered to its slice from its chain placement.
        var chain = sections.Select(s => s.ToReference.Then(referenceToSlice)).ToArray();
        var measured = new TemplateMatch?[n];
        Parallel.ForEach(usable, i => measured[i] = TemplateRegistration.Register(sections[i].Image!.Load(), sections[i].Slice!.Load(),
            sections[i].Unanchored ? null : chain[i], options.Registration));

        // The correction each measurement asks for: a rotation about one pivot common to the whole stack and the shift of that
        // pivot. One pivot for all, because these numbers are smoothed from section to section: a turn about each section's own
        // centre would mean another map for every section wherever the sections lie at different places on their slides, and
        // a smooth course of turns of ~10° about centres 50 px apart put neighbours 5–9 px apart (natbrainlab, seed 1).
        var angle = new double[n]; var dx = new double[n]; var dy = new double[n];
        (double X, double Y) pivot = (0, 0);
        var reason = new string?[n];
        var candidate = new bool[n];
        Corrections();
        // (b2) A stretch of the chain turned far from where the template puts it (a part the chain could not link to the
        // reference, or everything beyond a wrong link at an end): its common correction is applied to its chain placements
        // first, so that the tests below, which compare shifts at each section's own centre, see small corrections (turned
        // by 52°, the whole head's first sections looked 12–38 px apart from each other there although one rigid turn
        // placed them all; seed 1, sagittal).
        if (TurnSegments(sections, chain, measured, usable, centres, options)) Corrections();

        void Corrections()
        {
            // The pivot: the median of where the chain puts the section centres (near the tissue's middle on the slices).
            var placedCentres = usable.Select(i => chain[i].Apply(centres[i].Item1, centres[i].Item2)).ToList();
            pivot = placedCentres.Count == 0 ? (0, 0) : (Median(placedCentres.Select(c => c.X)), Median(placedCentres.Select(c => c.Y)));
            foreach (int i in usable)
            {
                var m = measured[i]!;
                // chain placement → measured placement, a map of the slice onto itself; where it takes the pivot.
                var (kx, ky) = chain[i].Inverse().Then(m.SectionToSlice).Apply(pivot.X, pivot.Y);
                angle[i] = AngleDifference(m.SectionToSlice.RotationDegrees, chain[i].RotationDegrees);
                dx[i] = kx - pivot.X; dy[i] = ky - pivot.Y;
                reason[i] = null; candidate[i] = false;
                if (m.Mirrored != chain[i].IsMirrored) reason[i] = "the template match is mirrored against the chain";
                else if (m.Similarity < options.MinSimilarity) reason[i] = $"similarity {m.Similarity:0.###} below {options.MinSimilarity:0.###}";
                else if (options.MinConfidence > 0 && m.Confidence < options.MinConfidence) reason[i] = $"confidence {m.Confidence:0.###} below {options.MinConfidence:0.###}";
                else candidate[i] = true;
            }
        }

        // (c) Outliers: deviation from the local course of the corrections, judged against the MAD over the stack.
        var deviationPx = new double?[n]; var deviationDeg = new double?[n];
        int half = Math.Max(1, options.SmoothingSections / 2);
        var segment = Segments(sections, options.ChainBreakConfidence);
        var steps = Steps(usable.Where(i => candidate[i]).ToList(), dx, dy, angle, segment, sections.Select(s => s.ChainConfidence).ToArray(), half, options);
        steps = PlaceSteps(steps, usable.Where(i => candidate[i]).ToList(), dx, dy, angle, segment, half, options);
        // Renumbered from the chain's own breaks (read from a copy: comparing with the renumbered entry before would start a
        // new segment at every section after the first step, so that each section followed its own match alone).
        var breaks = (int[])segment.Clone();
        for (int i = 1; i < n; i++) segment[i] = segment[i - 1] + (breaks[i] != breaks[i - 1] || steps.Contains(i) ? 1 : 0);
        foreach (int i in usable.Where(i => candidate[i]))
        {
            var near = usable.Where(j => candidate[j] && segment[j] == segment[i] && Math.Abs(j - i) <= half).ToList();
            // The local course is a robust line through the nearby corrections (Theil–Sen), not their median: at an end of the
            // stack, where the window reaches one way only and the corrections still change fast, a median lags behind the
            // course and set good matches aside (the whole head's last sections, seed 1: 6–10 px "away", right to 0.1 px).
            bool line = near.Count >= 4;
            double mxc = line ? TheilSen(near, dx, i) : Median(near.Select(j => dx[j])), myc = line ? TheilSen(near, dy, i) : Median(near.Select(j => dy[j])),
                mac = line ? TheilSen(near, angle, i) : Median(near.Select(j => angle[j]));
            deviationPx[i] = double.Hypot(dx[i] - mxc, dy[i] - myc);
            deviationDeg[i] = Math.Abs(angle[i] - mac);
        }
        var devs = usable.Where(i => candidate[i]).ToList();
        // The median similarity of the other matches of the pool within the window when this one's is below the rescue share
        // of it (a weak match, as the rescue judges one); null otherwise or with fewer than three to compare with.
        double? WeakAmong(int i, IEnumerable<int> pool)
        {
            var near = pool.Where(j => j != i && Math.Abs(j - i) <= half).Select(j => measured[j]!.Similarity).ToList();
            if (near.Count < 3) return null;
            double around = Median(near);
            return measured[i]!.Similarity < options.RescueSimilarityShare * around ? around : null;
        }
        // Each chain link's likely error (working pixels at the corners, and as a turn in degrees); null when the chain gave none.
        var (linkPx, linkDeg) = sections.Any(x => x.LinkErrorPx is not null) ? LinkSteps(sections) : (null, null);
        if (devs.Count >= 3)
        {
            double madPx = Numerics.Quantiles.RobustSigma(devs.Select(i => deviationPx[i]!.Value));
            double madDeg = Numerics.Quantiles.RobustSigma(devs.Select(i => deviationDeg[i]!.Value));
            double limitPx = Math.Max(options.OutlierMads * madPx, options.OutlierFloorPx), limitDeg = Math.Max(options.OutlierMads * madDeg, options.OutlierFloorDegrees);
            // Where the chain link itself is loose (the small, fast-changing end sections), a template match may differ from
            // the neighbours' course by as much as the link may be off: the limit grows to twice the link's error there.
            foreach (int i in devs)
            {
                bool known = linkPx is not null && sections[i].LinkErrorPx is not null;
                double looseLimitPx = known ? Math.Max(limitPx, 2 * linkPx![i]) : limitPx;
                double looseLimitDeg = known ? Math.Max(limitDeg, 2 * linkDeg![i]) : limitDeg;
                if (deviationPx[i] > looseLimitPx) reason[i] = $"{deviationPx[i]:0.#} px away from where its neighbours' template matches put it; at most {looseLimitPx:0.#} px accepted";
                else if (deviationDeg[i] > looseLimitDeg) reason[i] = $"turned {deviationDeg[i]:0.#}° against its neighbours' template matches; at most {looseLimitDeg:0.#}° accepted";
                // Beyond the usual limit only a match as good as its neighbours' may overrule a loose link: a weak one at a
                // small end section can lie anywhere (the macaque template cut coronally, seed 73: the last section's match,
                // similarity 0.034 against 0.25 around it, 14 px from a link whose routes lay 344 px apart, was used and
                // put it 25 px off).
                else if ((deviationPx[i] > limitPx || deviationDeg[i] > limitDeg) && WeakAmong(i, devs) is double around)
                    reason[i] = $"{deviationPx[i]:0.#} px and {deviationDeg[i]:0.#}° away from where its neighbours' template matches put it, and too weak " +
                                $"(similarity {measured[i]!.Similarity:0.###} against {around:0.###} around it) to overrule its loose chain link";
                if (reason[i] != null) candidate[i] = false;
            }
        }

        // (c2) Rescue: a section the template disagrees with, or one hanging on a weak chain link, is searched on its slice
        // from scratch; a match as good as its neighbours' and clearly better than the one near the chain placement
        // places it alone (a wrong mirror or turn from a torn section's weak pair registration is undone this way).
        var rescue = new TemplateMatch?[n];
        bool Loose(int i) => sections[i].OwnRouteDisagreementPx > options.LooseLinkPx;
        bool WeakMatch(int i) => WeakAmong(i, usable.Where(j => candidate[j])) is not null;
        var retry = usable.Where(i => !candidate[i] || sections[i].OwnConfidence < options.RescueChainConfidence || sections[i].SideUncertain
            || (Loose(i) && WeakMatch(i))).Concat(orphans).ToList();
        Parallel.ForEach(retry, i => rescue[i] = sections[i].Scratch ?? TemplateRegistration.Register(sections[i].Image!.Load(), sections[i].Slice!.Load(), null, options.Registration));
        // An unplaced section is judged against its neighbours' matches whichever way they were found: where the chain
        // failed over a whole stretch, the other unplaced sections' matches from scratch are its neighbours' matches.
        var scratch = orphans.ToDictionary(i => i, i => rescue[i]!.Similarity);
        foreach (int i in retry)
        {
            // The yardstick is how well the template matches sections here, whatever the chain did with them: the accepted
            // matches within the window, or the nearest three at an end of the stack cut off by a wrong link (the whole head,
            // seed 1: its first four sections, chained 90 px off, had no accepted match on their side of the step).
            var accepted = usable.Where(j => j != i && candidate[j]).OrderBy(j => Math.Abs(j - i)).ThenBy(j => j).ToList();
            var near = accepted.Where((j, rank) => Math.Abs(j - i) <= half || rank < 3).Select(j => measured[j]!.Similarity).ToList();
            if (sections[i].ChainFailed)
                near.AddRange(scratch.Where(o => o.Key != i && Math.Abs(o.Key - i) <= half).Select(o => o.Value));
            if (near.Count < 3) { rescue[i] = null; continue; }
            double local = Median(near), found = rescue[i]!.Similarity;
            // No runner-up: nothing else came close. (The runner-up is scored at half size, the match at full size; MI
            // changes little between the two for the smooth contrasts met here, and the margin absorbs it.)
            bool distinct = rescue[i]!.RunnerUpSimilarity is not double runner || found >= options.RescueDistinctMargin * runner;
            if (sections[i].ChainFailed)
            {
                if (found >= options.RescueSimilarityShare * local && distinct)
                    reason[i] = $"no confident match with a neighbour; placed by its own template match alone (similarity {found:0.###}, neighbours' median {local:0.###})";
                else
                {
                    reason[i] = found < options.RescueSimilarityShare * local
                        ? $"no confident match with a neighbour, and its template match is too weak to place it (similarity {found:0.###}, needs {options.RescueSimilarityShare * local:0.###})"
                        : $"no confident match with a neighbour, and its template match is ambiguous (similarity {found:0.###}, another placement {rescue[i]!.RunnerUpSimilarity:0.###})";
                    rescue[i] = null;
                }
                continue;
            }
            double own = measured[i]!.Similarity;
            // Here the alternative that matters is the chain's own placement, so the margin over it is the distinctness test
            // (a nearly symmetric specimen always has the other mirror close behind in the search from scratch).
            // Where the pairs could not tell the side, the template's side wins whenever its match is the better one.
            bool flips = rescue[i]!.Mirrored != chain[i].IsMirrored;
            bool sideByTemplate = sections[i].SideUncertain && flips && found > own;
            // The side was decided for the whole stack from every pair and the template's votes together (MirrorParity); a
            // match from scratch turns it over only where the chain had little to say: the pairs could not tell the side, or
            // the link itself is weak. (A strongly linked end section whose template match near the chain placement was set
            // aside found the other mirror 1.7× better from scratch, and was wrong: natbrainlab, seed 1, its last sections.)
            bool mayFlip = sections[i].SideUncertain || sections[i].OwnConfidence < options.RescueChainConfidence || Loose(i);
            if (flips && !mayFlip) rescue[i] = null;
            else if (found >= options.RescueSimilarityShare * local && (found >= options.RescueMargin * own || sideByTemplate))
                reason[i] = $"placed by its own template match (similarity {found:0.###}, neighbours' median {local:0.###}; near the chain placement {own:0.###}" +
                    (flips ? ", mirrored against the chain" : "") + ")" +
                    (sideByTemplate && found < options.RescueMargin * own ? "; its neighbours could not tell which side is up, the template decided" : "");
            else rescue[i] = null;
        }

        // (c3) A section placed by its own template match takes along the sections hanging on it by a confident link whose own
        // matches were set aside: their chain placements went through its wrong one. (The whole head's first section, seed 53:
        // registered to the next with confidence 1.0, that next section's link turned by 164° and its own match from scratch
        // rescuing it; the first section's match near its chain placement, weak, was set aside and the course beyond the
        // last accepted match left it 153 px off.) Taken only where the template likes the carried placement at least as well
        // as the chain's: a match searched from there scores no lower than the one near the chain placement.
        var carried = new (Transform2D Map, int From, Transform2D Check)?[n];
        for (bool more = true; more;)
        {
            more = false;
            foreach (int j in usable)
            {
                if (carried[j] is not null || rescue[j] is not null || candidate[j] || sections[j].Unanchored) continue;
                if (sections[j].LinkedTo is not int i || i < 0 || i >= n || sections[i].ChainFailed || sections[j].OwnConfidence < options.RescueChainConfidence) continue;
                Transform2D? placedI = rescue[i] is { } r ? r.SectionToSlice : carried[i]?.Map;
                if (placedI is null) continue;
                var map = chain[j].Then(chain[i].Inverse()).Then(placedI.Value);
                var there = TemplateRegistration.Register(sections[j].Image!.Load(), sections[j].Slice!.Load(), map, options.Registration);
                if (there.Similarity < measured[j]!.Similarity) continue;
                carried[j] = (map, rescue[i] is not null ? i : carried[i]!.Value.From, there.SectionToSlice);
                more = true;
            }
        }

        // (d) Fuse: the smoothed correction applied to the chain placement.
        var weight = new double[n];
        foreach (int i in usable) if (candidate[i] && rescue[i] is null) weight[i] = 1;
        // A step found in the matches whose every match past it was then set aside has nothing left to show it: the part past
        // it keeps the course before it instead of starting afresh with no correction at all (natbrainlab, seed 1: its last
        // three sections, a step seen at the first, all three set aside, were left uncorrected 21 px off).
        foreach (int s in steps.Order().ToList())
        {
            if (s == 0 || segment[s] == segment[s - 1]) continue;
            int id = segment[s];
            if (Enumerable.Range(s, n - s).Where(i => segment[i] == id).Any(i => weight[i] > 0)) continue;
            for (int i = s; i < n && segment[i] == id; i++) segment[i] = segment[s - 1];
            steps.Remove(s);
        }
        var sa = Smooth(angle, weight, segment, half); var sx = Smooth(dx, weight, segment, half); var sy = Smooth(dy, weight, segment, half);
        if (linkPx is not null && linkDeg is not null)
        {
            // Each link's error as a random step of the correction (shift at the section centre, turn about it), each template
            // match as a noisy look at it: the optimal course for that model (Rauch, Tung & Striebel 1965); a new segment
            // starts afresh. (Without link errors the window smooth above is the course.)
            var stepPx = (double[])linkPx.Clone(); var stepDeg = (double[])linkDeg.Clone();
            for (int i = 1; i < n; i++) if (segment[i] != segment[i - 1]) stepPx[i] = stepDeg[i] = double.PositiveInfinity;
            // The matches' noise told apart from the links' steps (consecutive corrections differ by both).
            double Noise(double[] v, double[] steps, double floor) => CourseSmoother.NoiseVarianceFromSteps(v, weight, steps, floor, floor);
            sa = CourseSmoother.Smooth(angle, weight, stepDeg, Noise(angle, stepDeg, MinDegrees), MinDegrees);
            sx = CourseSmoother.Smooth(dx, weight, stepPx, Noise(dx, stepPx, MinPx), MinPx);
            sy = CourseSmoother.Smooth(dy, weight, stepPx, Noise(dy, stepPx, MinPx), MinPx);
        }
        var result = new TemplateSectionPlacement[n];
        // Parts of the chain that nothing links to the reference are placed only through their accepted template matches;
        // a part with none lies nowhere known (a label atlas's first sections, seed 1: a part of five tiny end sections whose
        // matches were weak or disagreed with each other was written 120 px off).
        var measuredSegments = Enumerable.Range(0, n).Where(i => weight[i] > 0).Select(i => segment[i]).ToHashSet();
        for (int i = 0; i < n; i++)
        {
            var (qx, qy) = chain[i].Apply(centres[i].Item1, centres[i].Item2);
            var fused = chain[i].Then(Transform2D.Rotation(sa[i], pivot.X, pivot.Y)).Then(Transform2D.Translation(sx[i], sy[i]));
            // What the record reports is seen at the section's own centre: where the correction and the measurement move it.
            var (fx, fy) = fused.Apply(centres[i].Item1, centres[i].Item2);
            if (rescue[i] is { } own)
            {
                var (ox, oy) = own.SectionToSlice.Apply(centres[i].Item1, centres[i].Item2);
                bool noChain = sections[i].ChainFailed;
                result[i] = new TemplateSectionPlacement(i, own.SectionToSlice, chain[i], own.SectionToSlice, own.Similarity, own.Confidence,
                    noChain ? null : double.Hypot(ox - qx, oy - qy), noChain ? null : AngleDifference(own.SectionToSlice.RotationDegrees, chain[i].RotationDegrees),
                    deviationPx[i], deviationDeg[i], false, reason[i], sa[i], fx - qx, fy - qy, PlacedByTemplate: true);
                continue;
            }
            var m = measured[i];
            if (carried[i] is { } c)
            {
                var (cx, cy) = c.Map.Apply(centres[i].Item1, centres[i].Item2);
                result[i] = new TemplateSectionPlacement(i, c.Map, chain[i], m?.SectionToSlice, m?.Similarity, 0,
                    m == null ? null : Distance(m.SectionToSlice.Apply(centres[i].Item1, centres[i].Item2), (qx, qy)), m == null ? null : angle[i],
                    deviationPx[i], deviationDeg[i], m != null, reason[i], AngleDifference(c.Map.RotationDegrees, chain[i].RotationDegrees),
                    cx - qx, cy - qy, CarriedFrom: c.From, CarriedCheck: c.Check);
                continue;
            }
            if (sections[i].Unanchored && !measuredSegments.Contains(segment[i]))
            {
                string lost = "not linked to the rest of the stack by a confident neighbour match, and no template match in its part of the stack was " +
                              "good enough to place that part" + (m != null && reason[i] != null ? $" (its own: {reason[i]})" : "");
                result[i] = new TemplateSectionPlacement(i, chain[i], chain[i], m?.SectionToSlice, m?.Similarity, 0, null, null,
                    deviationPx[i], deviationDeg[i], false, lost, 0, 0, 0, Unplaced: true);
                continue;
            }
            bool outlier = m != null && !candidate[i];
            double confidence = m == null ? 0 : outlier ? 0 : m.Confidence;
            string? why = m != null ? reason[i] : sections[i].Image == null ? "gap" : sections[i].Slice == null ? "no template slice"
                : reason[i] ?? "no confident match with a neighbour, and too few template matches nearby to place it";
            double? residual = m == null ? null : Distance(m.SectionToSlice.Apply(centres[i].Item1, centres[i].Item2), (qx, qy));
            result[i] = new TemplateSectionPlacement(i, fused, chain[i], m?.SectionToSlice, m?.Similarity, confidence,
                residual, m == null ? null : angle[i], deviationPx[i], deviationDeg[i],
                outlier, why, sa[i], fx - qx, fy - qy);
        }
        return new TemplateGuideResult(result, referenceToSlice, referenceToSlice.IsMirrored, agreement,
            usable.Count + orphans.Count(i => rescue[i] is not null), result.Count(r => r.Outlier), [.. steps.Order()]);
    }

    /// <summary>
    /// For each stretch of the chain between links below <see cref="TemplateGuideOptions.ChainBreakConfidence"/>, the median
    /// turn its sections' template matches ask for; where that exceeds <see cref="TemplateGuideOptions.StepDegrees"/> (at
    /// least 3 matches with the chain's mirror and enough similarity), the stretch's chain placements are moved by one rigid
    /// map: that turn about the median of their centres, then the median shift there. True when any stretch moved.
    /// </summary>
    private static bool TurnSegments(IReadOnlyList<TemplateGuideSection> sections, Transform2D[] chain, TemplateMatch?[] measured,
        List<int> usable, (double, double)[] centres, TemplateGuideOptions options)
    {
        var segment = Segments(sections, options.ChainBreakConfidence);
        bool moved = false;
        foreach (var stretch in usable.Where(i => measured[i] is { } m && m.Mirrored == chain[i].IsMirrored && m.Similarity >= options.MinSimilarity)
                     .GroupBy(i => segment[i]))
        {
            var members = stretch.ToList();
            if (members.Count < 3) continue;
            // The median turn, taken about the first member's so that turns near ±180° do not average to 0.
            var turns = members.Select(i => AngleDifference(measured[i]!.SectionToSlice.RotationDegrees, chain[i].RotationDegrees)).ToList();
            double turn = AngleDifference(turns[0] + Median(turns.Select(t => AngleDifference(t, turns[0]))), 0);
            if (Math.Abs(turn) <= options.StepDegrees) continue;
            var at = members.Select(i => chain[i].Apply(centres[i].Item1, centres[i].Item2)).ToList();
            double px = Median(at.Select(p => p.X)), py = Median(at.Select(p => p.Y));
            // Each match's correction (chain⁻¹ then match) carried to the pivot; the median of where the pivot lands.
            var landed = members.Select(i => chain[i].Inverse().Then(measured[i]!.SectionToSlice).Apply(px, py)).ToList();
            var (tx, ty) = Transform2D.Rotation(turn, px, py).Apply(px, py);
            var move = Transform2D.Rotation(turn, px, py).Then(Transform2D.Translation(Median(landed.Select(p => p.X)) - tx, Median(landed.Select(p => p.Y)) - ty));
            for (int i = 0; i < sections.Count; i++)
                if (segment[i] == stretch.Key) chain[i] = chain[i].Then(move);
            moved = true;
        }
        return moved;
    }

    private static (double, double) CentreOf(IReadOnlyList<TemplateGuideSection> sections, TemplateGuideSection s)
    {
        var any = sections.FirstOrDefault(o => o.Image != null)?.Image;
        return any == null ? (0, 0) : ((any.Width - 1) / 2.0, (any.Height - 1) / 2.0);
    }

    private static (Transform2D Map, double Agreement) GlobalMap(IReadOnlyList<TemplateGuideSection> sections, List<int> usable,
        (double, double)[] centres, TemplateGuideOptions options)
    {
        if (usable.Count == 0) return (Transform2D.Identity, 0);
        int count = Math.Min(options.GlobalSampleSections, usable.Count);
        var sample = Enumerable.Range(0, count).Select(t => usable[(int)Math.Round((t + 0.5) * usable.Count / count - 0.5)]).Distinct().ToList();
        var matches = new TemplateMatch[sample.Count];
        Parallel.For(0, sample.Count, t => matches[t] = sections[sample[t]].Scratch
            ?? TemplateRegistration.Register(sections[sample[t]].Image!.Load(), sections[sample[t]].Slice!.Load(), null, options.Registration));
        var candidates = sample.Select((i, t) => (Index: i, Map: sections[i].ToReference.Inverse().Then(matches[t].SectionToSlice), Match: matches[t])).ToList();

        var slice = sections[usable[0]].Slice!;
        double tolerancePx = Math.Max(3, options.AgreementFraction * Math.Min(slice.Width, slice.Height));
        // Probe points of the reference frame: the chained centres of the sampled sections.
        var probes = sample.Select(i => sections[i].ToReference.Apply(centres[i].Item1, centres[i].Item2)).ToArray();
        bool Agree(Transform2D a, Transform2D b) =>
            a.IsMirrored == b.IsMirrored && TemplateRegistration.AngleGap(a.RotationDegrees, b.RotationDegrees) <= options.AgreementDegrees
            && probes.All(p => { var (ax, ay) = a.Apply(p.X, p.Y); var (bx, by) = b.Apply(p.X, p.Y); return double.Hypot(ax - bx, ay - by) <= tolerancePx; });
        int best = -1; double bestSupport = -1;
        for (int c = 0; c < candidates.Count; c++)
        {
            double support = candidates.Where(o => Agree(candidates[c].Map, o.Map)).Sum(o => Math.Max(o.Match.Similarity, 1e-6));
            if (support > bestSupport) { bestSupport = support; best = c; }
        }
        var inliers = candidates.Where(o => Agree(candidates[best].Map, o.Map)).ToList();

        // Least-squares rigid map (mirror fixed by the chosen candidate) from chained points to matched points.
        bool mirrored = candidates[best].Map.IsMirrored;
        var from = new List<(double X, double Y)>(); var to = new List<(double X, double Y)>();
        foreach (var o in inliers)
        {
            var image = sections[o.Index].Image!;
            double r = 0.3 * Math.Min(image.Width, image.Height);
            var (cx, cy) = centres[o.Index];
            foreach (var (px, py) in new[] { (cx, cy), (cx + r, cy), (cx - r, cy), (cx, cy + r), (cx, cy - r) })
            {
                from.Add(sections[o.Index].ToReference.Apply(px, py));
                to.Add(o.Match.SectionToSlice.Apply(px, py));
            }
        }
        return (FitRigid(from, to, mirrored), inliers.Count / (double)candidates.Count);
    }

    /// <summary>Least-squares rotation and shift (after a mirror about x when asked) taking <paramref name="from"/> to <paramref name="to"/> (<see cref="PointFit.Fit"/> without scale).</summary>
    internal static Transform2D FitRigid(IReadOnlyList<(double X, double Y)> from, IReadOnlyList<(double X, double Y)> to, bool mirrored) =>
        PointFit.Fit(from, to, mirrored, withScale: false);

    /// <summary>
    /// Where the chain itself jumps: a wrong link moves every section after it by the same amount, so the template's
    /// corrections step there and stay. Boundary b (between sections b − 1 and b) is a step when straight lines through
    /// the corrections of up to <paramref name="half"/> accepted sections on its left and on its right (at least 3 each,
    /// same segment; Theil–Sen lines, robust to a wild one: Sen 1968, J. Am. Stat. Assoc. 63:1379), carried to the
    /// boundary, differ by more than <see cref="TemplateGuideOptions.StepPx"/> or <see cref="TemplateGuideOptions.StepDegrees"/>
    /// (so a steep but smooth drift is not taken for a step; twice that across a link of confidence at least
    /// <see cref="TemplateGuideOptions.RescueChainConfidence"/>: in the MRI simulation with a wrong link of confidence 0.3
    /// the true step scored 3.0, the largest false one 1.5, and the healthy simulation at most 0.6),
    /// and the difference is the largest within ±<paramref name="half"/> boundaries (one break per step). A step is
    /// then a segment boundary: the corrections are smoothed on either side, not across it.
    /// </summary>
    private static HashSet<int> Steps(List<int> accepted, double[] dx, double[] dy, double[] angle, int[] segment, double[] chainConfidence,
        int half, TemplateGuideOptions options)
    {
        var size = new Dictionary<int, double>();
        if (accepted.Count < 6) return [];
        for (int b = accepted[0] + 1; b <= accepted[^1]; b++)
        {
            var left = accepted.Where(j => j < b && j >= b - half && segment[j] == segment[b - 1]).ToList();
            var right = accepted.Where(j => j >= b && j < b + half && segment[j] == segment[b]).ToList();
            if (segment[b] != segment[b - 1] || left.Count < 3 || right.Count < 3) continue;
            double At(List<int> side, double[] v) => TheilSen(side, v, b - 0.5);
            double px = double.Hypot(At(left, dx) - At(right, dx), At(left, dy) - At(right, dy));
            double deg = Math.Abs(At(left, angle) - At(right, angle));
            double score = Math.Max(px / options.StepPx, deg / options.StepDegrees);
            // A confident link must step twice as far to be called wrong (a noisy stretch of matches can mimic a small step).
            if (score > (chainConfidence[b] < options.RescueChainConfidence ? 1 : 2)) size[b] = score;
        }
        return size.Where(kv => size.All(o => Math.Abs(o.Key - kv.Key) > half || o.Value < kv.Value || (o.Value == kv.Value && o.Key >= kv.Key)))
            .Select(kv => kv.Key).ToHashSet();
    }

    /// <summary>
    /// Moves each step found by <see cref="Steps"/> to where the corrections really change. A step is only looked for where
    /// three accepted matches lie on either side, so at an end of the stack with few matches it can be found one or more
    /// sections late, and a section between the true place and the found one is then judged against the wrong side's course
    /// and set aside. (The label atlas cut coronally, seed 71 and seed 67: the first sections 3 and 4 chained 177° off on a
    /// distant link, section 7 chained right; the step was found after 7, whose right match was then "turned 176° against
    /// its neighbours" and whose placement took the wrong side's course: 123 px off.) The accepted section just before a step
    /// joins the stretch after it while its correction lies nearer that stretch's line (Theil–Sen, as the step was found)
    /// than the line of the sections before it, and the one just after joins the stretch before it in the same way; distances
    /// are in units of <see cref="TemplateGuideOptions.StepPx"/> and <see cref="TemplateGuideOptions.StepDegrees"/>, as steps
    /// are scored. The side a section leaves must remain a stretch: three matches, or two that agree with each other within a
    /// step's size. (Moved on until one match was left, a step put the macaque template's last section alone in its stretch,
    /// where its own wrong match, turned 38° from the course, placed it 42 px off: inia19-t1-brain j, seed 1, 1.5 px without
    /// the move.)
    /// </summary>
    private static HashSet<int> PlaceSteps(HashSet<int> steps, List<int> accepted, double[] dx, double[] dy, double[] angle, int[] segment,
        int half, TemplateGuideOptions options)
    {
        if (steps.Count == 0) return steps;
        var placed = new HashSet<int>();
        var order = steps.Order().ToList();
        for (int t = 0; t < order.Count; t++)
        {
            int b = order[t];
            int lower = t > 0 ? order[t - 1] : int.MinValue, upper = t + 1 < order.Count ? order[t + 1] : int.MaxValue;
            // The stretches on either side, within the window and the chain's own segment, and not past the next step.
            List<int> Before(int at) => accepted.Where(j => j < at && j >= at - half && j >= lower && segment[j] == segment[at - 1]).ToList();
            List<int> After(int at) => accepted.Where(j => j >= at && j < at + half && j < upper && segment[j] == segment[at]).ToList();
            double Off(int j, List<int> side)
            {
                double lx = Line(side, dx, j), ly = Line(side, dy, j), la = Line(side, angle, j);
                return Math.Max(double.Hypot(dx[j] - lx, dy[j] - ly) / options.StepPx, Math.Abs(AngleDifference(angle[j], la)) / options.StepDegrees);
            }
            // The side a section leaves must still be a stretch: three matches, or two that agree with each other within a
            // step's size (two wild matches at a ragged end are no stretch; moving a step next to them left them to place
            // themselves: natbrainlab j, seed 1, p95 1.37 → 2.84 px).
            bool Holds(List<int> side) => side.Count >= 3 || (side.Count == 2 && Off(side[1], [side[0]]) <= 1);
            // (A move makes the other direction's test fail for the same section; the count only bounds the walk.)
            for (int moves = 0; moves <= half; moves++)
            {
                bool moved = false;
                var before = Before(b);
                var after = After(b);
                if (before.Count >= 2 && after.Count >= 1)
                {
                    int j = before[^1];
                    // The stretch the section would leave, seen from the section itself (the window moves with it).
                    var rest = accepted.Where(x => x < j && x >= j - half && x >= lower && segment[x] == segment[j]).ToList();
                    if (j > lower && segment[j] == segment[b] && Holds(rest) && Off(j, after) < Off(j, rest)) { b = j; moved = true; continue; }
                }
                if (after.Count >= 2 && before.Count >= 1)
                {
                    int j = after[0];
                    var rest = accepted.Where(x => x > j && x <= j + half && x < upper && segment[x] == segment[j]).ToList();
                    if (j + 1 < upper && segment[j] == segment[b - 1] && Holds(rest) && Off(j, before) < Off(j, rest)) { b = j + 1; moved = true; }
                }
                if (!moved) break;
            }
            placed.Add(b);
            order[t] = b;
        }
        return placed;
    }

    /// <summary>A Theil–Sen line through the values at <paramref name="at"/>, or their median where fewer than two points determine one.</summary>
    private static double Line(List<int> at, double[] v, double x) => at.Count >= 2 ? TheilSen(at, v, x) : Median(at.Select(j => v[j]));

    /// <summary>The Theil–Sen line through (j, v[j]) for j in <paramref name="at"/>, evaluated at <paramref name="x"/>.</summary>
    private static double TheilSen(List<int> at, double[] v, double x)
    {
        var slopes = new List<double>();
        for (int a = 0; a < at.Count; a++)
            for (int b = a + 1; b < at.Count; b++) slopes.Add((v[at[b]] - v[at[a]]) / (at[b] - at[a]));
        double slope = Median(slopes);
        double intercept = Median(at.Select(j => v[j] - slope * j));
        return intercept + slope * x;
    }

    private static int[] Segments(IReadOnlyList<TemplateGuideSection> sections, double breakConfidence)
    {
        var segment = new int[sections.Count];
        for (int i = 1; i < sections.Count; i++)
            segment[i] = segment[i - 1] + (sections[i].ChainConfidence < breakConfidence ? 1 : 0);
        return segment;
    }

    /// <summary>
    /// Weighted local linear regression with tricube weights over ±<paramref name="half"/> sections (within a segment);
    /// a weighted mean where the line is not determined, and the nearest weighted value where the window holds none.
    /// </summary>
    internal static double[] Smooth(double[] values, double[] weights, int[] segment, int half)
    {
        int n = values.Length;
        var result = new double[n];
        double h = half + 1;
        for (int i = 0; i < n; i++)
        {
            double s0 = 0, s1 = 0, s2 = 0, t0 = 0, t1 = 0;
            for (int j = Math.Max(0, i - half); j <= Math.Min(n - 1, i + half); j++)
            {
                if (weights[j] <= 0 || segment[j] != segment[i]) continue;
                double u = Math.Abs(j - i) / h, k = 1 - u * u * u;
                double w = weights[j] * k * k * k, d = j - i;
                s0 += w; s1 += w * d; s2 += w * d * d; t0 += w * values[j]; t1 += w * d * values[j];
            }
            if (s0 <= 0)
            {
                int nearest = -1;
                for (int r = 1; r < n && nearest < 0; r++)
                    foreach (int j in (ReadOnlySpan<int>)[i - r, i + r])
                        if (j >= 0 && j < n && weights[j] > 0 && segment[j] == segment[i]) { nearest = j; break; }
                if (nearest < 0)
                    for (int r = 1; r < n && nearest < 0; r++)
                        foreach (int j in (ReadOnlySpan<int>)[i - r, i + r])
                            if (j >= 0 && j < n && weights[j] > 0) { nearest = j; break; }
                result[i] = nearest < 0 ? 0 : values[nearest];
                continue;
            }
            double det = s0 * s2 - s1 * s1;
            result[i] = det > 1e-9 * s0 * s0 ? (s2 * t0 - s1 * t1) / det : t0 / s0;
        }
        return result;
    }

    /// <summary>Smallest chain link error assumed (working pixels; degrees): no link is perfect.</summary>
    private const double MinPx = 0.1, MinDegrees = 0.02;

    /// <summary>
    /// Each section's link error in working pixels at the image corners, and as a turn in degrees (that distance over the
    /// corner radius); unknown ones take the median of the known; the first section has none (∞: a fresh start).
    /// </summary>
    private static (double[] Px, double[] Degrees) LinkSteps(IReadOnlyList<TemplateGuideSection> sections)
    {
        int n = sections.Count;
        var known = sections.Where(x => x.LinkErrorPx is double v && double.IsFinite(v)).Select(x => x.LinkErrorPx!.Value).ToList();
        double typical = known.Count > 0 ? Median(known) : 1;
        var px = new double[n];
        var degrees = new double[n];
        for (int i = 0; i < n; i++)
        {
            px[i] = i == 0 ? double.PositiveInfinity : Math.Max(MinPx, sections[i].LinkErrorPx is double v && double.IsFinite(v) ? v : typical);
            double corner = sections[i].Image is { } im ? 0.5 * double.Hypot(im.Width, im.Height) : 1;
            degrees[i] = double.IsPositiveInfinity(px[i]) ? px[i] : px[i] / corner * 180 / Math.PI;
        }
        return (px, degrees);
    }

    private static double AngleDifference(double a, double b) => Angles.Wrap(a - b);

    private static double Distance((double X, double Y) a, (double X, double Y) b) => double.Hypot(a.X - b.X, a.Y - b.Y);

    private static double Median(IEnumerable<double> values)
    {
        var list = values as IReadOnlyCollection<double> ?? values.ToList();
        return list.Count == 0 ? 0 : Numerics.Quantiles.Median(list);
    }
}
