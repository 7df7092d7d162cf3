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

    [Fact]
    public void APairAcrossALostSectionWeighsAsASecondNeighbour()
    {
        // Ten sections, section 5 of the numbering lost: stack positions 0–4 are numbers 0–4, positions 5–9 numbers 6–10.
        // The pair across the gap, (5, 4), prefers the wrong relative mirror (NCC 0.866 against 0.8, Fisher z 0.22); the other
        // pairs across the gap prefer the right one by 0.03 NCC. Counted as a nearest pair it turns one side over (gain 0.22
        // against 0.09 of the pairs and 0.1 of the prior); counted as the two-section pair it is (half weight, and the
        // position pairs 3 apart across the gap are 4 sections apart and left out), the prior keeps every section face up.
        var truth = Sides(10);
        var pairs = Pairs(truth, 0.03, (m, f) => (m, f) == (5, 4) ? -0.066 : 0.03);
        var steps = Enumerable.Range(0, 10).Select(i => (double)(i < 5 ? i : i + 1)).ToList();
        var byPosition = MirrorParity.Decide(10, pairs);
        Assert.True(byPosition.Flipped[5] != byPosition.Flipped[4], "counted as a nearest pair, the wrong pair should turn one side over (else this test shows nothing)");
        var bySteps = MirrorParity.Decide(10, pairs, steps);
        Assert.Equal(truth, bySteps.Flipped);
        // Positions 3 apart across the gap are 4 sections apart: left out, so the decision cannot depend on them.
        var withFarWrong = new Dictionary<(int, int), PairResult>(pairs) { [(7, 4)] = Pair(0.1, 0.9) };
        Assert.Equal(bySteps.Flipped, MirrorParity.Decide(10, withFarWrong, steps).Flipped);
    }

    [Fact]
    public void FarPairsThatProveUnreliableOnTheSeriesCannotTurnAnEndOver()
    {
        // 40 sections, number 34 lost: positions 34–39 (numbers 35–40) are the end of the stack, tied to the rest across the
        // gap. The pair across it, (34, 33), two sections apart, prefers the wrong relative mirror clearly (NCC 0.95 against
        // 0.8), as the pair across the lost section did at the end of the whole head cut coronally (docs/accuracy.md).
        var truth = Sides(40, 7, 18, 30);
        var steps = Enumerable.Range(0, 40).Select(i => (double)(i < 34 ? i : i + 1)).ToList();
        double AcrossGap(int m, int f) => (m, f) == (34, 33) ? -0.15 : 0.05;

        // Where the far pairs agree with the nearest ones everywhere else, they are trusted at their full weight, and the
        // one clear far pair outweighs the face-up prior of the six end sections: the end is turned over. (This is what
        // the decision did before it measured the far pairs' reliability; it shows the test can fail.)
        var trusted = MirrorParity.Decide(40, Pairs(truth, 0.05, AcrossGap), steps);
        Assert.True(Enumerable.Range(34, 6).All(i => trusted.Flipped[i] != truth[i]), "trusted far pairs should turn the end over");

        // Where the series' far pairs agree with the nearest pairs no more often than a coin (a nearly symmetric specimen),
        // their weight falls to nothing and the nearest pairs and the prior decide: every side right.
        double Coin(int m, int f) => m - f >= 2 ? (new Random(100 * m + f).Next(2) == 0 ? 0.05 : -0.05) : AcrossGap(m, f);
        var coin = MirrorParity.Decide(40, Pairs(truth, 0.05, Coin), steps);
        Assert.Equal(truth, coin.Flipped);
    }

    [Fact]
    public void TemplateVotesDecideWhereThePairsCannotAndTheirHandednessIsFound()
    {
        // Sections 10–13 are tied to the rest by pairs that say nothing (equal scores): the prior would keep them face up,
        // but 11–12 lie face down. Votes from the template for every section (lead 0.05, as on the macaque template, where
        // every such vote was right) settle them, whether face up looks unmirrored on the template or mirrored (the series
        // scanned from the other side): only the relation between the votes matters.
        var truth = Sides(20, 3, 11, 12);
        var pairs = Pairs(truth, 0.05, (m, f) => m >= 10 && m <= 13 || f >= 10 && f <= 13 ? 0 : 0.05);
        Assert.NotEqual(truth, MirrorParity.Decide(20, pairs).Flipped);
        foreach (bool handedness in new[] { false, true })
        {
            var votes = truth.Select(down => (down != handedness) ? new SideVote(0, 0.05) : new SideVote(0.05, 0)).Select(v => (SideVote?)v).ToList();
            var result = MirrorParity.Decide(20, pairs, null, votes);
            Assert.Equal(truth, result.Flipped);
            Assert.All(new[] { 11, 12 }, i => Assert.True(result.Margin[i] > 0.02, $"section {i}: margin {result.Margin[i]} should include its vote"));
        }
        // A single wrong vote against clear pairs changes nothing.
        var one = Enumerable.Repeat((SideVote?)null, 20).ToList();
        one[5] = new SideVote(0, 0.05);
        Assert.Equal(Sides(20, 3), MirrorParity.Decide(20, Pairs(Sides(20, 3), 0.05), null, one).Flipped);
    }
}
