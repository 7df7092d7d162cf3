using StackBuild.Geometry;
using StackBuild.Register;
using StackBuild.Solve;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The whole-stack mirror decision (<see cref="MirrorParity"/>) on pairs whose scores are set by hand, so that the right answer
/// is known exactly: which sections lie face down, and what composing the pairs along a chain would have decided instead.
/// </summary>
public sealed class MirrorParityTests
{
    private static PairHypothesis Hypothesis(bool mirrored, double ncc) => new(Transform2D.Identity, mirrored, 0, ncc, 10);

    /// <summary>A pair whose best hypothesis with relative mirror false scores <paramref name="same"/> and with true <paramref name="other"/>.</summary>
    private static PairResult Pair(double same, double? other)
    {
        var a = Hypothesis(false, same);
        var b = other is double o ? Hypothesis(true, o) : null;
        var best = b is not null && b.Ncc > a.Ncc ? b : a;
        var second = ReferenceEquals(best, a) ? b : a;
        return new PairResult(best, second, 0.5) { OtherMirror = second };
    }

    /// <summary>Pairs up to three apart for sections lying as <paramref name="faceDown"/> says: the true relative mirror leads by <paramref name="lead"/>.</summary>
    private static Dictionary<(int, int), PairResult> Pairs(bool[] faceDown, double lead, Func<int, int, double>? leadOf = null)
    {
        var pairs = new Dictionary<(int, int), PairResult>();
        for (int m = 1; m < faceDown.Length; m++)
            for (int d = 1; d <= 3 && m - d >= 0; d++)
            {
                int f = m - d;
                double good = 0.8 - 0.1 * (d - 1), l = leadOf?.Invoke(m, f) ?? lead;
                bool relative = faceDown[m] != faceDown[f];
                pairs[(m, f)] = relative ? Pair(good - l, good) : Pair(good, good - l);
            }
        return pairs;
    }

    private static bool[] Sides(int n, params int[] down) => Enumerable.Range(0, n).Select(down.Contains).ToArray();

    [Fact]
    public void ClearEvidenceGivesEverySideExactly()
    {
        var truth = Sides(30, 3, 11, 12, 20, 29);
        var result = MirrorParity.Decide(30, Pairs(truth, 0.05));
        Assert.Equal(truth, result.Flipped);
        Assert.Empty(result.Overruled);
        Assert.All(result.Margin, m => Assert.True(m > 0.05, $"margin {m}"));
    }

    [Fact]
    public void OneWrongNearestPairDoesNotTurnOverTheRest()
    {
        // The nearest pair (15, 14) prefers the wrong relative mirror as clearly as the others prefer the right one; composed along a chain it would turn over
        // sections 15–29. The pairs reaching over it (two and three apart) outweigh it.
        var truth = Sides(30, 5, 22);
        var pairs = Pairs(truth, 0.04, (m, f) => (m, f) == (15, 14) ? -0.04 : 0.04);
        var chained = new bool[30];
        for (int i = 1; i < 30; i++) chained[i] = chained[i - 1] ^ pairs[(i, i - 1)].Best.Mirrored;
        Assert.Equal(15, Enumerable.Range(0, 30).Count(i => chained[i] != truth[i])); // what the chain would have done
        var result = MirrorParity.Decide(30, pairs);
        Assert.Equal(truth, result.Flipped);
        Assert.Contains((15, 14), result.Overruled);
    }

    [Fact]
    public void WithoutEvidenceEverySectionIsTakenFaceUp()
    {
        // Pairs that match nothing (NCC below 0.1 both ways) say nothing: the prior decides, face up.
        var pairs = new Dictionary<(int, int), PairResult>();
        for (int m = 1; m < 10; m++) pairs[(m, m - 1)] = Pair(0.05, 0.06);
        var result = MirrorParity.Decide(10, pairs);
        Assert.All(result.Flipped, Assert.False);
        // The margin is the prior's alone.
        Assert.All(result.Margin, m => Assert.Equal(MirrorParity.FaceDownCost, m, 9));
    }

    [Fact]
    public void ASectionOnlyWeaklyTiedHasASmallMarginAndAStretchFollowsThePrior()
    {
        // Section 10 lies face up, but every pair it is part of barely prefers that (lead 0.002): it must report that its
        // side is uncertain (margin below the report's 0.05), while the sections around it stay sure.
        var truth = Sides(30, 4, 25);
        var pairs = Pairs(truth, 0.05, (m, f) => m == 10 || f == 10 ? 0.002 : 0.05);
        var result = MirrorParity.Decide(30, pairs);
        Assert.Equal(truth, result.Flipped);
        Assert.True(result.Margin[10] < 0.05, $"section 10: margin {result.Margin[10]}");
        foreach (int i in new[] { 0, 8, 9, 11, 12, 29 }) Assert.True(result.Margin[i] > 0.05, $"section {i}: margin {result.Margin[i]}");

        // Sections 20–29 tied to the rest only by pairs that say nothing either way (equal scores): the stretch's side
        // follows the prior, so its one face-down section (25) stays face down relative to its neighbours and the other
        // nine lie face up.
        pairs = Pairs(truth, 0.05, (m, f) => f < 20 && m >= 20 ? 0 : 0.05);
        result = MirrorParity.Decide(30, pairs);
        Assert.Equal(truth, result.Flipped);
    }

    [Fact]
    public void ASideTheManifestGivesIsKept()
    {
        // A pair whose other mirror was not tried (the manifest said how both sections were mounted) is obeyed even against
        // the prior and against weak evidence from the pairs around it.
        var truth = Sides(8, 6);
        var pairs = Pairs(truth, 0.001);
        pairs[(6, 5)] = new PairResult(Hypothesis(true, 0.5), null, 0.5); // known: mirrored relative to 5
        var result = MirrorParity.Decide(8, pairs);
        Assert.NotEqual(result.Flipped[5], result.Flipped[6]);
    }
}
