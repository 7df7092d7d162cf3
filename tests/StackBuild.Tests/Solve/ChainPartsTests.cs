using StackBuild.Geometry;
using StackBuild.Register;
using StackBuild.Solve;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The chain on hand-set pair results: a stretch that nothing links to the reference becomes a part of its own, chained
/// inside, and links never reach further than <see cref="ChainSolver.MaxReach"/> sections.
/// </summary>
public sealed class ChainPartsTests
{
    [Fact]
    public void APartWhoseReferenceLiesFaceDownKeepsEverySectionsDecidedSide()
    {
        // Stack: 0–1 the reference's part, 2 not placed, 3–5 a part chained to its own reference 4, and 6–7 a second part on
        // reference 6. Which side is up was decided for the whole stack: 4 face down like 3, 5 face up; 6 and 7 face up.
        // Within part 1 the chain maps 3 and 5 onto 4 as their pairs say (3 the same side as 4, 5 the other), 4 itself the
        // identity, so without the stack's decision the part would come out the other way up as a whole.
        var turn = Transform2D.Rotation(20, 10, 10).Then(Transform2D.Translation(3, -2));
        var mirror = Transform2D.MirrorX(12);
        var chain = new List<ChainPlacement>
        {
            new(Transform2D.Identity, LinkRoute.Reference, -1, null, null),
            new(turn, LinkRoute.Neighbour, 0, null, null),
            new(Transform2D.Identity, LinkRoute.Failed, -1, null, null),
            new(turn, LinkRoute.Neighbour, 4, null, null, 1, 1),
            new(Transform2D.Identity, LinkRoute.PartReference, -1, null, null, 0, 1),
            new(mirror.Then(turn), LinkRoute.Neighbour, 4, null, null, 1, 1),
            new(Transform2D.Identity, LinkRoute.PartReference, -1, null, null, 0, 2),
            new(turn, LinkRoute.Neighbour, 6, null, null, 1, 2),
        };
        bool[] flipped = [false, false, false, true, true, false, false, false];
        var parity = new ParityResult(flipped, new double[8], []);
        var placed = Pipeline.SolveStage.PartsOnTheStacksSide(chain, parity, _ => 12);
        foreach (int i in new[] { 0, 1, 3, 4, 5, 6, 7 })
            Assert.Equal(flipped[i] != flipped[0], placed[i].ToReference.IsMirrored);
        // Turned over about the part reference's centre: the part's inner placements are kept (4 onto itself, mirrored).
        var (x, y) = placed[4].ToReference.Apply(12, 5);
        Assert.Equal(12, x, 9);
        Assert.Equal(5, y, 9);
        // Part 2, whose reference lies the stack's way up, and the reference's own part are untouched.
        Assert.Same(chain[6], placed[6]);
        Assert.Same(chain[7], placed[7]);
        Assert.Same(chain[1], placed[1]);
        // Without the turn part 1 comes out the wrong way up as a whole: what the test guards against.
        Assert.NotEqual(flipped[3] != flipped[0], chain[3].ToReference.IsMirrored);
    }

    /// <summary>Each section lies shifted by (i, 0) from section 0; pairs that cross the break between 11 and 12 match nothing.</summary>
    private static PairResult Pair(int moving, int fixedIndex, int breakAt)
    {
        bool crosses = fixedIndex < breakAt && moving >= breakAt;
        var map = Transform2D.Translation(moving - fixedIndex, 0);
        var best = new PairHypothesis(map, false, 0, crosses ? 0.05 : 0.9, 10);
        return new PairResult(best, null, crosses ? 0 : 0.9);
    }

    private static (double X, double Y)[] Corners(int i) => [(0, 0), (10, 0), (0, 10), (10, 10)];

    [Fact]
    public void AStretchNothingLinksIsChainedAsAPartOfItsOwn()
    {
        // 20 sections; the reference is chosen near the middle (section 9 or 10, left of the break at 12), so 12–19 are
        // cut off from it.
        var chain = ChainSolver.Solve(20, (m, f) => Pair(m, f, 12), Corners);
        var main = chain.Take(12).ToList();
        var part = chain.Skip(12).ToList();
        Assert.Single(main, c => c.Route == LinkRoute.Reference);
        Assert.All(main, c => Assert.Equal(0, c.Part));
        Assert.All(part, c => Assert.Equal(1, c.Part));
        Assert.Single(part, c => c.Route == LinkRoute.PartReference);
        Assert.DoesNotContain(chain, c => c.Route == LinkRoute.Failed);
        // Inside each part the shifts are exact: section i lies (i − j, 0) from section j of the same part.
        int r = part.FindIndex(c => c.Route == LinkRoute.PartReference) + 12;
        for (int i = 12; i < 20; i++)
        {
            var (x, _) = chain[i].ToReference.Apply(0, 0);
            var (rx, _) = chain[r].ToReference.Apply(0, 0);
            Assert.Equal(i - r, x - rx, 9);
        }
    }

    [Fact]
    public void TheTemplateGuideSeesEachWeakLinkAtTheBoundaryItCrosses()
    {
        // A weak boundary (every pair across it has confidence 0.33) on each side of the reference: between 3 and 4, and
        // between 16 and 17. Below the reference a section is registered to one after it, so section 3's own pair is the weak
        // one; above, section 17's. Either way the boundary the guide must split at lies before section 4 and before 17.
        static PairResult Weak(int moving, int fixedIndex)
        {
            var map = Transform2D.Translation(moving - fixedIndex, 0);
            int low = Math.Min(moving, fixedIndex), high = Math.Max(moving, fixedIndex);
            bool weak = (low <= 3 && high >= 4) || (low <= 16 && high >= 17);
            return new PairResult(new PairHypothesis(map, false, 0, weak ? 0.5 : 0.9, 10), null, weak ? 0.33 : 0.9);
        }
        var chain = ChainSolver.Solve(20, Weak, Corners);
        int reference = chain.ToList().FindIndex(c => c.Route == LinkRoute.Reference);
        Assert.InRange(reference, 5, 15);
        var (confidence, _) = StackBuild.Pipeline.TemplateStage.Boundaries(chain);
        for (int n = 0; n < 20; n++)
            Assert.Equal(n is 4 or 17 ? 0.33 : n == 0 ? 1 : 0.9, confidence[n], 9);
        // The pair that placed section 3 is the weak one (registered to 4), while section 4's own pair is strong.
        Assert.Equal(0.33, chain[3].Pair!.Confidence, 9);
        Assert.Equal(0.9, chain[4].Pair!.Confidence, 9);
    }

    [Fact]
    public void WithoutATemplateAPartHangsOnItsBestMatchAcrossTheBreak()
    {
        // Across the break between 11 and 12 every pair is below the chain's trust (0.2): 12 onto 11 says the truth with
        // confidence 0.15; every other pair across says the part lies 50 px further on, with confidence 0.05.
        static PairResult Crossing(int moving, int fixedIndex)
        {
            bool crosses = fixedIndex < 12 && moving >= 12;
            bool best = moving == 12 && fixedIndex == 11;
            var map = Transform2D.Translation(moving - fixedIndex + (crosses && !best ? 50 : 0), 0);
            double confidence = !crosses ? 0.9 : best ? 0.15 : 0.05;
            return new PairResult(new PairHypothesis(map, false, 0, crosses ? 0.25 : 0.9, 10), null, confidence);
        }
        var chain = ChainSolver.Solve(20, Crossing, Corners);
        Assert.Equal(1, chain[15].Part);
        var (joined, joins) = ChainSolver.JoinParts(chain, Crossing);
        Assert.Equal(new PartJoin(1, 12, 11, 0.15), Assert.Single(joins));
        // Every section now lies (i − j, 0) from every other, across the break too; the part keeps its number for the flags.
        var (x0, _) = joined[0].ToReference.Apply(0, 0);
        for (int i = 0; i < 20; i++)
            Assert.Equal(i, joined[i].ToReference.Apply(0, 0).X - x0, 9);
        Assert.All(joined.Skip(12), c => Assert.Equal(1, c.Part));
    }

    [Fact]
    public void AfterAJoinTheLargestPartIsTheStackAndTheReferencesSmallerPartIsUncertain()
    {
        // Parts by hand: the reference's part 0 holds 4 sections, part 1 (joined to it) 12, part 2 (joined) 3, part 3 (never
        // joined) 3, and one section failed. Seen from the largest part, part 0 is the one hanging on a weak match: flagging
        // the twelve sections of part 1 and not the four of part 0 would point the user at the wrong side of the join.
        var parts = new[] { 3, 3, 3, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, -1, 2, 2, 2 };
        var chain = parts.Select(p => new ChainPlacement(Transform2D.Identity, p < 0 ? LinkRoute.Failed : LinkRoute.Neighbour, 0, null, null,
            Part: Math.Max(0, p))).ToList();
        var joins = new[] { new PartJoin(1, 7, 6, 0.1), new PartJoin(2, 20, 18, 0.05) };
        var uncertain = ChainSolver.UncertainParts(chain, joins, out int largest);
        Assert.Equal(1, largest);
        Assert.Equal(new HashSet<int> { 0, 2, 3 }, uncertain.ToHashSet());
        var placements = new StackBuild.Pipeline.Placements(chain, null, null, null, false, true, []) { PartJoins = joins, UncertainParts = uncertain, LargestPart = largest };
        Assert.True(placements.IsUncertainPart(0));
        Assert.False(placements.IsUncertainPart(1));
        Assert.Equal(joins[0], placements.JoinOf(0)); // part 0 hangs on the match that placed the larger part 1
        Assert.Equal(joins[1], placements.JoinOf(2));
        Assert.Null(placements.JoinOf(3));

        // Where part 0 is the largest, it stays the stack: only the other parts are uncertain.
        var small = ChainSolver.UncertainParts(chain.Select(c => c.Part == 1 ? c with { Part = 0 } : c).ToList(), [joins[1]], out largest);
        Assert.Equal(0, largest);
        Assert.Equal(new HashSet<int> { 2, 3 }, small.ToHashSet());
        // No parts: nothing uncertain; template builds (UncertainParts null) keep the old rule, every part but 0.
        Assert.Empty(ChainSolver.UncertainParts(chain.Select(c => c with { Part = 0 }).ToList(), [], out _));
        var templateBuild = new StackBuild.Pipeline.Placements(chain, null, null, null, false, true, []);
        Assert.False(templateBuild.IsUncertainPart(0));
        Assert.True(templateBuild.IsUncertainPart(1));
    }

    [Fact]
    public void APartWithNothingAcrossTheBreakIsNotJoined()
    {
        // The pairs across the break (NCC 0.05 in Pair, but the join needs some match: here none is above zero).
        static PairResult Nothing(int moving, int fixedIndex)
        {
            bool crosses = fixedIndex < 12 && moving >= 12;
            var map = Transform2D.Translation(moving - fixedIndex, 0);
            return new PairResult(new PairHypothesis(map, false, 0, crosses ? -0.1 : 0.9, 10), null, crosses ? 0 : 0.9);
        }
        var chain = ChainSolver.Solve(20, Nothing, Corners);
        var (joined, joins) = ChainSolver.JoinParts(chain, Nothing);
        Assert.Empty(joins);
        Assert.Equal(chain, joined);
    }

    [Fact]
    public void ARunTooShortForAPartStaysFailed()
    {
        // Only sections 18 and 19 lie beyond the break: fewer than MinPartSections, so they are left out, not guessed.
        var chain = ChainSolver.Solve(20, (m, f) => Pair(m, f, 18), Corners);
        Assert.Equal(LinkRoute.Failed, chain[18].Route);
        Assert.Equal(LinkRoute.Failed, chain[19].Route);
        Assert.DoesNotContain(chain, c => c.Route == LinkRoute.PartReference);
    }
}
