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
    public void ARunTooShortForAPartStaysFailed()
    {
        // Only sections 18 and 19 lie beyond the break: fewer than MinPartSections, so they are left out, not guessed.
        var chain = ChainSolver.Solve(20, (m, f) => Pair(m, f, 18), Corners);
        Assert.Equal(LinkRoute.Failed, chain[18].Route);
        Assert.Equal(LinkRoute.Failed, chain[19].Route);
        Assert.DoesNotContain(chain, c => c.Route == LinkRoute.PartReference);
    }
}
