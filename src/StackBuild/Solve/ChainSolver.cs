using StackBuild.Geometry;
using StackBuild.Register;

namespace StackBuild.Solve;

/// <summary>How a section was tied to the output frame.</summary>
public enum LinkRoute
{
    /// <summary>The reference section: it defines the frame.</summary>
    Reference,
    /// <summary>Through its nearest present neighbour towards the reference.</summary>
    Neighbour,
    /// <summary>Through the second-nearest (the nearest did not match well enough, or was itself not placed).</summary>
    SecondNeighbour,
    /// <summary>Through a more distant placed section (several neighbours in a row failed).</summary>
    Distant,
    /// <summary>No confident match to any placed section: not placed.</summary>
    Failed,
    /// <summary>No confident match to any placed section, but placed by its own template match alone (template builds only).</summary>
    Template,
    /// <summary>
    /// The reference of a part of the stack that no confident match links to the rest (a run of sections that match nothing
    /// across it): placed as scanned, so the part's place relative to the rest is unknown unless a template gives it.
    /// </summary>
    PartReference,
}

/// <summary>One section's place in the reference frame, and why.</summary>
/// <param name="ToReference">Maps the section's registration-image pixels to the reference section's.</param>
/// <param name="LinkedTo">Index of the section it was registered to (−1 for the reference and failures).</param>
/// <param name="Pair">The pairwise result used (moving = this section), or null.</param>
/// <param name="RouteDisagreement">
/// Mean distance in registration pixels, over the section's corners, between its placement through the
/// nearest neighbour and through the second-nearest; null unless both routes are trusted (confidence at least
/// <see cref="ChainOptions.MinConfidence"/>).
/// </param>
/// <param name="PathConfidence">The weakest pair confidence on the way to the reference (1 for the reference).</param>
/// <param name="AnyRouteDisagreement">The same distance between the two nearest routes whether trusted or not (null with fewer
/// than two): the template course loosens a link wherever a second route disagrees, trusted or not.</param>
/// <param name="Part">0 for sections chained to the reference; k for the k-th part of the stack chained to its own part reference.</param>
public sealed record ChainPlacement(Transform2D ToReference, LinkRoute Route, int LinkedTo, PairResult? Pair, double? RouteDisagreement,
    double PathConfidence = 1, int Part = 0, double? AnyRouteDisagreement = null);

/// <summary>Part <paramref name="Part"/> of the stack placed through the pair (<paramref name="Moving"/> in the part, <paramref name="Fixed"/> outside it; indices in stack order) of confidence <paramref name="Confidence"/>.</summary>
public sealed record PartJoin(int Part, int Moving, int Fixed, double Confidence);

public sealed record ChainOptions
{
    /// <summary>A pair whose confidence is below this is not trusted for placing a section.</summary>
    public double MinConfidence { get; init; } = 0.2;
    /// <summary>The second neighbour's route is taken only when its path confidence beats the nearest's by more than this.</summary>
    public double PreferNearestMargin { get; init; } = 0.1;
}

/// <summary>
/// Ties every section to one reference frame by chaining pairwise rigid registrations from the reference
/// outwards (the neighbour chain; common practice). Drift correction comes on top of this later.
/// </summary>
public static class ChainSolver
{
    /// <summary>
    /// <paramref name="pair"/>(moving, fixed) registers section <c>moving</c> onto section <c>fixed</c>
    /// (indices into the sections in stack order); the solver asks for first and second neighbours and, when
    /// those fail, for more distant ones. <paramref name="corners"/> gives each section's corner points in its
    /// registration image, for measuring route disagreement.
    /// </summary>
    public static IReadOnlyList<ChainPlacement> Solve(int count, Func<int, int, PairResult> pair,
        Func<int, (double X, double Y)[]> corners, ChainOptions? options = null)
    {
        options ??= new ChainOptions();
        var placed = new ChainPlacement?[count];
        if (count == 0) return [];
        int reference = ChooseReference(count, pair, options) ?? 0;
        placed[reference] = new ChainPlacement(Transform2D.Identity, LinkRoute.Reference, -1, null, null);

        foreach (int direction in new[] { +1, -1 })
        {
            for (int i = reference + direction; i >= 0 && i < count; i += direction)
                placed[i] = Link(i, direction, placed, pair, corners, options);
        }
        // A run of sections the chain could not reach (nothing across it matches: a stretch of damaged or lost sections, a
        // change of stain) is chained to a reference of its own, longest run first, so that the part keeps its inner
        // alignment; where it lies relative to the rest stays unknown (a template can place it).
        for (int part = 1; ; part++)
        {
            var runs = FailedRuns(placed).Where(r => r.Last - r.First + 1 >= MinPartSections).OrderByDescending(r => r.Last - r.First).ToList();
            bool started = false;
            foreach (var (first, last) in runs)
            {
                if (ChooseReference(last - first + 1, (m, f) => pair(m + first, f + first), options) is not int within) continue;
                int r = within + first;
                placed[r] = new ChainPlacement(Transform2D.Identity, LinkRoute.PartReference, -1, null, null, 0, part);
                foreach (int direction in new[] { +1, -1 })
                    for (int i = r + direction; i >= first && i <= last; i += direction)
                        placed[i] = Link(i, direction, placed, pair, corners, options) is { Route: not LinkRoute.Failed } linked
                            ? linked with { Part = part } : placed[i];
                started = true;
                break;
            }
            if (!started) break;
        }
        return placed.Select(p => p!).ToList();
    }

    /// <summary>
    /// The section nearest the middle of the stack that matches both its next sections confidently (else one of them):
    /// the middle sections are the largest and best matched, and a reference in the middle halves the longest chain. The
    /// end sections of a specimen are small and change shape fast, the worst choice for the frame.
    /// </summary>
    /// <returns>Null when no section matches a next one confidently.</returns>
    private static int? ChooseReference(int count, Func<int, int, PairResult> pair, ChainOptions options)
    {
        int Confident(int r)
        {
            int n = 0;
            for (int next = r + 1; next <= Math.Min(count - 1, r + 2); next++)
                if (pair(next, r).Confidence >= options.MinConfidence) n++;
            return n;
        }
        var order = Enumerable.Range(0, count).OrderBy(r => Math.Abs(r - (count - 1) / 2.0)).ThenBy(r => r).ToList();
        foreach (int need in new[] { 2, 1 })
            foreach (int r in order.Where(r => r <= count - 1 - need))
                if (Confident(r) >= need) return r;
        return null;
    }

    /// <summary>
    /// Furthest a link may reach (stack positions): sections further apart look too different for a match between them to
    /// mean anything, and a chance match of two roundish outlines placed whole stretches wrongly (a whole-brain series cut
    /// from the JHU atlas, 2026-12-03); beyond it the stretch becomes a part of its own.
    /// </summary>
    public const int MaxReach = 4;

    /// <summary>Fewest sections in a run the chain could not reach for it to be chained as a part of its own.</summary>
    public const int MinPartSections = 3;

    private static IEnumerable<(int First, int Last)> FailedRuns(ChainPlacement?[] placed)
    {
        for (int i = 0; i < placed.Length; i++)
        {
            if (placed[i]!.Route != LinkRoute.Failed) continue;
            int j = i;
            while (j + 1 < placed.Length && placed[j + 1]!.Route == LinkRoute.Failed) j++;
            yield return (i, j);
            i = j;
        }
    }

    private static ChainPlacement Link(int i, int direction, ChainPlacement?[] placed, Func<int, int, PairResult> pair,
        Func<int, (double X, double Y)[]> corners, ChainOptions options)
    {
        // Candidates: the nearest placed sections towards the reference, nearest first.
        var candidates = new List<(int Index, LinkRoute Route)>();
        for (int step = 1, j = i - direction; j >= 0 && j < placed.Length && step <= MaxReach; step++, j -= direction)
        {
            if (placed[j] is not { } p || p.Route == LinkRoute.Failed) continue;
            candidates.Add((j, step == 1 ? LinkRoute.Neighbour : step == 2 ? LinkRoute.SecondNeighbour : LinkRoute.Distant));
            if (candidates.Count == 2 || p.Route is LinkRoute.Reference or LinkRoute.PartReference) break;
        }
        var routes = candidates.Select(c =>
        {
            var r = Oriented(pair, i, c.Index);
            var through = placed[c.Index]!;
            return (c.Index, c.Route, Result: r.Result, ToReference: r.Map.Then(through.ToReference),
                Path: Math.Min(r.Result.Confidence, through.PathConfidence));
        }).ToList();

        // The nearest neighbour is preferred; the second one is taken when the route through it is clearly more
        // trustworthy (a weak pair, or a neighbour that was itself placed with little confidence).
        var usable = routes.Where(r => r.Result.Confidence >= options.MinConfidence).ToList();
        // Route disagreement only between two routes that are both trusted: a route through a pair that did not match (a
        // speck of an end section, a torn neighbour) says nothing about this section's error, and counting it put estimates
        // of centimetres on well-placed sections.
        double Disagreement(Transform2D first, Transform2D second) => corners(i).Average(p =>
        {
            var a = first.Apply(p.X, p.Y);
            var b = second.Apply(p.X, p.Y);
            return Math.Sqrt((a.X - b.X) * (a.X - b.X) + (a.Y - b.Y) * (a.Y - b.Y));
        });
        double? disagreement = usable.Count == 2 ? Disagreement(usable[0].ToReference, usable[1].ToReference) : null;
        // With both routes trusted they are the same two routes: measured once.
        double? anyDisagreement = disagreement ?? (routes.Count == 2 ? Disagreement(routes[0].ToReference, routes[1].ToReference) : null);
        if (usable.Count == 0)
            return new ChainPlacement(Transform2D.Identity, LinkRoute.Failed, -1, routes.Count > 0 ? routes.MaxBy(r => r.Result.Confidence).Result : null, disagreement, 0,
                AnyRouteDisagreement: anyDisagreement);
        var chosen = usable[0];
        if (usable.Count > 1 && usable[1].Path > chosen.Path + options.PreferNearestMargin) chosen = usable[1];
        return new ChainPlacement(chosen.ToReference, chosen.Route, chosen.Index, chosen.Result, disagreement, chosen.Path,
            AnyRouteDisagreement: anyDisagreement);
    }

    /// <summary>
    /// Without a template nothing else says where a part of the stack lies (<see cref="Solve"/> chains each part to a
    /// reference of its own), so each part is joined to the rest through its best match across the break: of every pair
    /// of sections within <see cref="MaxReach"/> positions, one in the part and one already joined, the one of highest
    /// confidence (then NCC), however weak. Parts are joined best match first; a part with no pair across whose NCC is
    /// above zero stays where it was. The sections keep their <see cref="ChainPlacement.Part"/>, so reports still say
    /// the part hangs on a weak match.
    /// </summary>
    public static (IReadOnlyList<ChainPlacement> Chain, IReadOnlyList<PartJoin> Joins) JoinParts(IReadOnlyList<ChainPlacement> chain,
        Func<int, int, PairResult> pair)
    {
        var placed = chain.ToArray();
        var joined = placed.Select(p => p.Route != LinkRoute.Failed && p.Part == 0).ToArray();
        var joins = new List<PartJoin>();
        while (true)
        {
            (int Moving, int Fixed, Transform2D Map, PairResult Result)? best = null;
            for (int i = 0; i < placed.Length; i++)
            {
                if (placed[i].Route == LinkRoute.Failed || placed[i].Part == 0 || joined[i]) continue;
                for (int j = Math.Max(0, i - MaxReach); j <= Math.Min(placed.Length - 1, i + MaxReach); j++)
                {
                    if (!joined[j]) continue;
                    var (map, result) = Oriented(pair, i, j);
                    if (result.Best.Ncc <= 0) continue;
                    if (best is not { } b || result.Confidence > b.Result.Confidence
                        || (result.Confidence == b.Result.Confidence && result.Best.Ncc > b.Result.Best.Ncc))
                        best = (i, j, map, result);
                }
            }
            if (best is not { } join) break;
            int part = placed[join.Moving].Part;
            // The part's frame → the joined frame, through the one pair: section i's own placement undone, then the pair's map.
            var correction = placed[join.Moving].ToReference.Inverse().Then(join.Map).Then(placed[join.Fixed].ToReference);
            for (int s = 0; s < placed.Length; s++)
            {
                if (placed[s].Route == LinkRoute.Failed || placed[s].Part != part) continue;
                placed[s] = placed[s] with { ToReference = placed[s].ToReference.Then(correction) };
                joined[s] = true;
            }
            joins.Add(new PartJoin(part, join.Moving, join.Fixed, join.Result.Confidence));
        }
        return (placed, joins);
    }

    /// <summary>
    /// After <see cref="JoinParts"/>: the parts whose place relative to the rest of the stack is uncertain. The parts linked by
    /// joins are placed relative to each other through weak matches only, so which of them is "right" is a matter of which
    /// one the stack is seen from; the largest (most placed sections; part 0, the reference's, on a tie) is taken as the
    /// stack, and every other joined part — part 0 too when it is not the largest — is uncertain, as is every part no join
    /// reached. Without parts: empty. <paramref name="largest"/>: the part taken as the stack.
    /// </summary>
    public static IReadOnlySet<int> UncertainParts(IReadOnlyList<ChainPlacement> chain, IReadOnlyList<PartJoin> joins, out int largest)
    {
        var sizes = chain.Where(c => c.Route != LinkRoute.Failed).GroupBy(c => c.Part).ToDictionary(g => g.Key, g => g.Count());
        var joinedParts = joins.Select(j => j.Part).Append(0).Where(sizes.ContainsKey).ToHashSet();
        largest = joinedParts.Count == 0 ? 0 : joinedParts.OrderByDescending(p => sizes[p]).ThenBy(p => p).First();
        int anchor = largest;
        return sizes.Keys.Where(p => p != anchor).ToHashSet();
    }

    /// <summary>The map from section <paramref name="moving"/> to <paramref name="target"/>; registered later-onto-earlier and inverted when needed, so each pair is computed once.</summary>
    private static (Transform2D Map, PairResult Result) Oriented(Func<int, int, PairResult> pair, int moving, int target)
    {
        if (moving > target)
        {
            var r = pair(moving, target);
            return (r.Best.MovingToFixed, r);
        }
        var back = pair(target, moving);
        return (back.Best.MovingToFixed.Inverse(), back);
    }
}
