using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>
/// Stage 4, the placements: every prepared section's map from its working pixels to the frame's (at first the reference
/// section's working pixels), with how it was linked.
/// </summary>
/// <param name="Chain">One placement per prepared section.</param>
/// <param name="ChainBefore">The neighbour chain's own placements, kept when a global solve or the template replaced them.</param>
/// <param name="Smoothing">The global solve, when it ran.</param>
/// <param name="Parity">The whole stack's mirror decision, when the sections were registered.</param>
/// <param name="FaceFlipped">True when the frame was turned face up.</param>
/// <param name="Aligned">True when the sections were aligned (not placed as scanned).</param>
/// <param name="Warnings">What the stages so far found worth telling, in order.</param>
/// <param name="OnTemplate">How the sections were placed on a template (<see cref="TemplateStage"/>), when there is one.</param>
public sealed record Placements(IReadOnlyList<ChainPlacement> Chain, IReadOnlyList<ChainPlacement>? ChainBefore, SmoothingResult? Smoothing,
    ParityResult? Parity, bool FaceFlipped, bool Aligned, IReadOnlyList<string> Warnings, TemplatePlacement? OnTemplate = null)
{
    /// <summary>The parts of the stack that hang on one weak match (<see cref="ChainSolver.JoinParts"/>; builds without a template).</summary>
    public IReadOnlyList<PartJoin> PartJoins { get; init; } = [];

    /// <summary>
    /// The parts whose place relative to the rest is uncertain (<see cref="ChainSolver.UncertainParts"/>): every part but the
    /// largest of those joined in a build without a template; null: every part but 0 (template builds, where the template
    /// places the parts).
    /// </summary>
    public IReadOnlySet<int>? UncertainParts { get; init; }

    /// <summary>The part taken as the stack when parts were joined (<see cref="ChainSolver.UncertainParts"/>); 0 otherwise.</summary>
    public int LargestPart { get; init; }

    /// <summary>Whether a placed section of part <paramref name="part"/> lies where the rest of the stack is uncertain.</summary>
    public bool IsUncertainPart(int part) => UncertainParts?.Contains(part) ?? part != 0;

    /// <summary>
    /// The weak match that placed part <paramref name="part"/> relative to the part taken as the stack: its own join, or, for
    /// the reference's part 0 when another part is larger, the join of that larger part. Null when none.
    /// </summary>
    public PartJoin? JoinOf(int part) =>
        PartJoins.FirstOrDefault(j => j.Part == part) ?? (part == 0 && LargestPart != 0 ? PartJoins.FirstOrDefault(j => j.Part == LargestPart) : null);

    /// <summary>Index (in the prepared sections) of the section the chain was built from.</summary>
    public int ReferenceIndex => ChainPlacements.ReferenceIndex(Chain);

    /// <summary>Every placement followed by <paramref name="map"/> (the frame changed for all sections at once).</summary>
    public Placements Reexpressed(Transform2D map) =>
        this with { Chain = Reexpress(Chain, map), ChainBefore = ChainBefore is null ? null : Reexpress(ChainBefore, map) };

    private static IReadOnlyList<ChainPlacement> Reexpress(IReadOnlyList<ChainPlacement> chain, Transform2D map) =>
        chain.Select(c => c.Route == LinkRoute.Failed ? c : c with { ToReference = c.ToReference.Then(map) }).ToList();
}

public static class SolveStage
{
    /// <summary>
    /// Aligned: the chain from the pairs, the frame turned face up by majority, and the global solve when asked for.
    /// <paramref name="pairs"/> is null when nothing is aligned (no alignment asked, or one section).
    /// </summary>
    public static Placements Solve(SeriesPlan plan, PreparedSections sections, PairSet? pairs)
    {
        var options = plan.Options;
        if (pairs is null)
        {
            // Unaligned: centred as scanned, turned face up only where the manifest says a section was mounted face down.
            var placed = sections.Sections.Select((w, i) => new ChainPlacement(
                (w.Entry.MountedMirrored == true ? Transform2D.MirrorX((w.Width - 1) / 2.0) : Transform2D.Identity).Then(CentreOn(w, sections[0])),
                i == 0 ? LinkRoute.Reference : LinkRoute.Neighbour, -1, null, null)).ToList();
            return new Placements(placed, null, null, null, false, false, options.Align ? ["only one section: nothing to align"] : []);
        }
        var chain = ChainSolver.Solve(sections.Count, pairs.Pair, i => Corners(sections[i]), options.Chain);
        chain = PartsOnTheStacksSide(chain, pairs.Parity, i => (sections[i].Width - 1) / 2.0);
        // Without a template nothing else can say where a part the chain could not link lies: it hangs on its best match
        // across the break, however weak (a template build leaves the parts to the template, which places them by itself).
        IReadOnlyList<PartJoin> joins = [];
        IReadOnlySet<int>? uncertain = null;
        int largest = 0;
        if (options.Template is null)
        {
            (chain, joins) = ChainSolver.JoinParts(chain, pairs.Pair);
            uncertain = ChainSolver.UncertainParts(chain, joins, out largest);
        }
        chain = FaceMajorityUp(chain, sections, out bool faceFlipped);
        if (options.Solver != PlacementSolver.Smoothing || sections.Count <= 2)
            return new Placements(chain, null, null, pairs.Parity, faceFlipped, true, []) { PartJoins = joins, UncertainParts = uncertain, LargestPart = largest };

        // The solve weighs first- and second-neighbour pairs; the third-neighbour ones only serve the mirror decision.
        var observations = pairs.Pairs.Where(kv => kv.Key.Moving - kv.Key.Fixed <= 2).Select(kv => new PairObservation(kv.Key.Moving, kv.Key.Fixed, kv.Value))
            .OrderBy(o => o.Moving).ThenBy(o => o.Fixed).ToList();
        // Sections of a part the chain could not link to the reference are left as the chain put them (no pair ties them).
        var smoothing = SmoothingSolver.Solve(chain.Select(c => c.Route == LinkRoute.Failed || c.Part != 0 ? (Transform2D?)null : c.ToReference).ToList(),
            ChainPlacements.ReferenceIndex(chain), observations, i => SamplePoints(sections[i]), options.Smoothing with { MinConfidence = options.Chain.MinConfidence });
        var solved = smoothing.ToReference;
        var smoothed = chain.Select((c, i) => c.Route == LinkRoute.Failed || c.Part != 0 ? c : c with { ToReference = solved[i] }).ToList();
        return new Placements(smoothed, chain, smoothing, pairs.Parity, faceFlipped, true, []) { PartJoins = joins, UncertainParts = uncertain, LargestPart = largest };
    }

    /// <summary>The centre and the corners of the middle half of a section: where the solver measures disagreement.</summary>
    private static (double X, double Y)[] SamplePoints(WorkingSection image)
    {
        double w = image.Width - 1, h = image.Height - 1;
        return [(w / 2, h / 2), (w / 4, h / 4), (3 * w / 4, h / 4), (w / 4, 3 * h / 4), (3 * w / 4, 3 * h / 4)];
    }

    private static (double X, double Y)[] Corners(WorkingSection image) =>
        [(0, 0), (image.Width - 1, 0), (0, image.Height - 1), (image.Width - 1, image.Height - 1)];

    /// <summary>Centres one image on another (for unaligned placement).</summary>
    private static Transform2D CentreOn(WorkingSection image, WorkingSection reference) =>
        Transform2D.Translation((reference.Width - image.Width) / 2.0, (reference.Height - image.Height) / 2.0);

    /// <summary>
    /// A part of the chain (a stretch no confident match links to the rest) is placed relative to its own part reference,
    /// laid as that section lies on its slide; but which side of every section is up was decided for the whole stack at once
    /// (<see cref="MirrorParity"/>), across the break too. A part whose reference lies the other way up than the stack's
    /// reference is turned over about the part reference's centre (<paramref name="centreX"/>, its image's x centre), so that
    /// every section of it keeps its decided side. (The macaque template cut coronally, seed 71: the last 17 sections, a part
    /// after a lost section whose reference was face down, came out the wrong way up with a template although every side had
    /// been decided right; the template's matches, all "mirrored against the chain", were set aside. A build without a
    /// template joins the part through a pair (<see cref="ChainSolver.JoinParts"/>), whose map carries the mirror either way.)
    /// </summary>
    internal static IReadOnlyList<ChainPlacement> PartsOnTheStacksSide(IReadOnlyList<ChainPlacement> chain, ParityResult parity, Func<int, double> centreX)
    {
        int reference = ChainPlacements.ReferenceIndex(chain);
        var turn = new Dictionary<int, Transform2D>();
        for (int i = 0; i < chain.Count; i++)
            if (chain[i].Route == LinkRoute.PartReference && parity.Flipped[i] != parity.Flipped[reference])
                turn[chain[i].Part] = Transform2D.MirrorX(centreX(i));
        if (turn.Count == 0) return chain;
        return chain.Select(c => c.Route != LinkRoute.Failed && c.Part != 0 && turn.TryGetValue(c.Part, out var mirror)
            ? c with { ToReference = c.ToReference.Then(mirror) } : c).ToList();
    }

    /// <summary>
    /// Most sections are mounted face up (common practice), so when more than half came out mirrored relative to
    /// the reference, the reference itself was the mirrored one: flip the frame about the reference's centre.
    /// A manifest that says how the reference was mounted overrides the vote.
    /// </summary>
    private static IReadOnlyList<ChainPlacement> FaceMajorityUp(IReadOnlyList<ChainPlacement> chain, PreparedSections sections, out bool flip)
    {
        int referenceIndex = ChainPlacements.ReferenceIndex(chain);
        var placedChain = chain.Where(c => c.Route != LinkRoute.Failed).ToList();
        flip = sections[referenceIndex].Entry.MountedMirrored
            ?? placedChain.Count(c => c.ToReference.IsMirrored) * 2 > placedChain.Count;
        if (!flip) return chain;
        var r = sections[referenceIndex];
        var mirror = Transform2D.MirrorX((r.Width - 1) / 2.0);
        return chain.Select(c => c.Route == LinkRoute.Failed ? c : c with { ToReference = c.ToReference.Then(mirror) }).ToList();
    }
}
