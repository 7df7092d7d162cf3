using StackBuild.Register;

namespace StackBuild.Solve;

/// <summary>Which sections lie face down, decided for the whole stack at once.</summary>
/// <param name="Flipped">Per section (stack order): true when it lies face down (mirrored).</param>
/// <param name="Margin">
/// Per section: how much the decision's score (weighted Fisher z of the pairs' NCC, and the face-up prior) would drop if this
/// section were turned the other way, alone or together with every section on its side of one link, whichever costs less
/// (≥ 0); near 0 means the evidence cannot tell which side of this section is up.
/// </param>
/// <param name="Overruled">Pairs whose own best hypothesis had the other mirror than the stack decided.</param>
/// <summary>
/// A template's evidence on one section's side, in the pairs' units (weighted Fisher z): what the decision gains when the
/// section looks unmirrored, or mirrored, on the template.
/// </summary>
public sealed record SideVote(double Unmirrored, double Mirrored);

public sealed record ParityResult(bool[] Flipped, double[] Margin, IReadOnlyList<(int Moving, int Fixed)> Overruled);

/// <summary>
/// Decides every section's mounting side (face up or face down) from every
/// registered pair at once, instead of composing the pairs' own decisions along a chain, where one wrong decision at a
/// weak link would turn over every section after it. Each pair (i, j) scores both relative mirrors by the NCC of its
/// best hypothesis with that mirror; the decision maximises the weighted sum of the scores of the chosen relative
/// mirrors over all pairs, less a small cost for every section decided face down (most are mounted face up). The pairs reach at most <see cref="MaxReach"/> sections, so the exact maximum is found by
/// dynamic programming over the mounting sides of the last sections (the Viterbi algorithm; Viterbi 1967, IEEE Trans.
/// Inf. Theory 13:260; Forney 1973, Proc. IEEE 61:268).
/// </summary>
public static class MirrorParity
{
    /// <summary>The furthest pair (in stack positions) the decision uses.</summary>
    public const int MaxReach = 3;

    /// <summary>
    /// The prior that a section was mounted face up (most are; common practice): each section decided face down costs this
    /// much evidence (weighted Fisher z). Where the pairs cannot tell (a nearly symmetric end of the specimen, a stretch
    /// linked to the rest only across a lost section) the decision falls to face up instead of to chance. 0.02 lies in the
    /// middle of the values (0.01–0.03) that gave the fewest wrong sides on the series this was developed on (docs/accuracy.md).
    /// </summary>
    public const double FaceDownCost = 0.02;

    /// <summary>Below this margin the side of a section counts as uncertain: flagged, and decided by a template's match when there is one (this project's rule of thumb).</summary>
    public const double UncertainMargin = 0.05;

    /// <summary>
    /// Weight of a pair <paramref name="distance"/> sections apart: 1, 0.5, 0.25. Nearer pairs look more alike and their
    /// mirror evidence is more often right: on the tuning series (macaque template inia19, coronal, docs/accuracy.md)
    /// the NCC lead of the right mirror was positive for most nearest pairs but about as often negative as positive for
    /// pairs two and three sections apart; equal weights turned a block of 24 sections over there, these turned 3.
    /// </summary>
    public static double Weight(int distance) => distance switch { 1 => 1.0, 2 => 0.5, _ => 0.25 };

    /// <summary>
    /// An NCC as evidence: Fisher's z = atanh(r) (Fisher 1915, Biometrika 10:507), whose differences have about the same
    /// spread whatever r is, so a lead of 0.01 between two well-matched hypotheses counts more than between two poor ones.
    /// </summary>
    public static double Evidence(double ncc) => Math.Atanh(Math.Clamp(ncc, -0.999, 0.999));

    private static double Score(double ncc) => double.IsNegativeInfinity(ncc) ? ncc : Evidence(ncc);

    /// <summary>
    /// <paramref name="pairs"/>: (moving, fixed) → result, moving &gt; fixed, stack positions. A pair whose other mirror
    /// was not tried (the manifest said how both were mounted) forces its relative mirror. A pair whose both sides
    /// score below 0.1 NCC says nothing. <paramref name="steps"/>: each position's place along the stack in section
    /// numbers (the spacing's units); a pair is weighted by how many sections apart the two really lie, so a pair across a
    /// lost section counts as a second-neighbour pair and one beyond <see cref="MaxReach"/> sections is left out (the whole
    /// head cut coronally, seed 1: the pair across a lost section preferred the wrong side 0.57 to 0.34 NCC, as pairs two
    /// sections apart often do, and turned four sections over). Null: the positions are consecutive numbers.
    /// </summary>
    public static ParityResult Decide(int count, IReadOnlyDictionary<(int Moving, int Fixed), PairResult> pairs, IReadOnlyList<double>? steps = null,
        IReadOnlyList<SideVote?>? votes = null)
    {
        if (count == 0) return new ParityResult([], [], []);
        // score[(i, j)] = (NCC if same side, NCC if other side), weighted; −∞ where a side was not tried.
        var raw = new Dictionary<(int, int), (double Same, double Other, int Distance)>();
        foreach (var ((m, f), r) in pairs)
        {
            if (m - f < 1 || m - f > MaxReach) continue;
            int d = steps is null ? m - f : Math.Max(1, (int)Math.Round(steps[m] - steps[f]));
            if (d > MaxReach) continue;
            double same = r.NccFor(false) ?? double.NegativeInfinity, other = r.NccFor(true) ?? double.NegativeInfinity;
            if (Math.Max(same, other) < 0.1) continue;
            raw[(m, f)] = (Score(same), Score(other), d);
        }
        var reliability = Reliability(raw);
        var scores = new Dictionary<(int, int), (double Same, double Other)>();
        foreach (var (key, r) in raw)
        {
            // A side the manifest gave (the other never tried, −∞) is kept whatever the distance's reliability.
            bool forced = double.IsNegativeInfinity(r.Same) || double.IsNegativeInfinity(r.Other);
            double w = Weight(r.Distance) * (forced ? 1 : reliability[r.Distance]);
            if (w > 0) scores[key] = (w * r.Same, w * r.Other);
        }
        // The template's side votes hold up to one unknown: whether face-up sections look mirrored on it (the series' and
        // the template's handedness). Both answers are decided and the better total kept.
        var (flipped, total) = Viterbi(count, scores, Unary(count, votes, false));
        bool templateMirrored = false;
        if (votes is not null && votes.Any(v => v is not null))
        {
            var (flippedOther, totalOther) = Viterbi(count, scores, Unary(count, votes, true));
            if (totalOther > total) { flipped = flippedOther; templateMirrored = true; }
        }
        var unary = Unary(count, votes, templateMirrored);

        // Margins: what turning the section over alone, or with every section on its side of any one link, would cost.
        double Turn(int i) => unary[i, flipped[i] ? 1 : 0] - unary[i, flipped[i] ? 0 : 1]; // the prior's and votes' change when section i turns over
        var single = new double[count];
        var crossing = new double[count + 1]; // crossing[b]: change of the pairs that span the link b−1 | b, by a difference array
        foreach (var ((m, f), sc) in scores)
        {
            bool relative = flipped[m] != flipped[f];
            // A pair whose other side was never tried (the manifest said) makes a turn impossible: a large finite cost.
            double change = Math.Min(1e6, (relative ? sc.Other : sc.Same) - (relative ? sc.Same : sc.Other));
            single[m] += change; single[f] += change;
            crossing[f + 1] += change; crossing[m + 1] -= change;
        }
        for (int b = 1; b <= count; b++) crossing[b] += crossing[b - 1];
        var after = new double[count + 1];
        for (int i = count - 1; i >= 0; i--) after[i] = after[i + 1] + Turn(i);
        double before = 0;
        var blockBefore = new double[count]; // best block ending at or after i (sections 0..b−1 turned, b > i)
        var blockAfter = new double[count];  // best block starting at or before i (sections b..n−1 turned, b ≤ i)
        for (int b = 1; b < count; b++) { before += Turn(b - 1); blockBefore[b - 1] = crossing[b] + before; }
        if (count > 0) blockBefore[count - 1] = before + Turn(count - 1); // the whole stack turned over: the prior and the votes alone
        for (int i = count - 2; i >= 0; i--) blockBefore[i] = Math.Min(blockBefore[i], blockBefore[i + 1]);
        for (int i = 0; i < count; i++)
            blockAfter[i] = i == 0 ? after[0] : Math.Min(blockAfter[i - 1], crossing[i] + after[i]);
        var margin = new double[count];
        for (int i = 0; i < count; i++)
        {
            double m = Math.Min(single[i] + Turn(i), Math.Min(blockBefore[i], blockAfter[i]));
            margin[i] = Math.Max(0, m);
        }
        var overruled = pairs.Where(kv => kv.Key.Moving - kv.Key.Fixed <= MaxReach && kv.Value.OtherMirror is not null
                                          && kv.Value.Best.Mirrored != (flipped[kv.Key.Moving] != flipped[kv.Key.Fixed]))
            .Select(kv => kv.Key).OrderBy(k2 => k2.Moving).ThenBy(k2 => k2.Fixed).ToList();
        return new ParityResult(flipped, margin, overruled);
    }

    /// <summary>Fewest checks of one distance's pairs against the nearest pairs for <see cref="Reliability"/> to judge that distance.</summary>
    public const int MinReliabilityChecks = 10;

    /// <summary>
    /// How far this series' pairs <c>d</c> sections apart can be trusted on the side, as a factor on <see cref="Weight"/>
    /// (index d; 1 for nearest pairs). Each pair d ≥ 2 sections apart whose positions are linked by nearest pairs all the
    /// way is checked against them: the relative mirror it prefers against the one its path of nearest pairs composes to.
    /// With agreement share p over those checks the factor is 2p − 1, clipped to [0, 1]: 1 when the far pairs agree with
    /// the near ones every time, 0 when they agree no more often than a coin would (a nearly symmetric section matches
    /// its mirror image two or three sections away about as well as itself; on the whole head cut coronally, seed 1, the
    /// pair across a lost section preferred the wrong side 0.57 to 0.34 NCC and turned an end block over). The nearest pairs
    /// are right far more often, so agreement with them measures the far pairs' own reliability. With fewer than
    /// <see cref="MinReliabilityChecks"/> checks a distance keeps factor 1. This project's rule, measured in docs/accuracy.md.
    /// </summary>
    internal static double[] Reliability(IReadOnlyDictionary<(int Moving, int Fixed), (double Same, double Other, int Distance)> raw)
    {
        var factor = new double[MaxReach + 1];
        Array.Fill(factor, 1.0);
        var agree = new int[MaxReach + 1];
        var checks = new int[MaxReach + 1];
        foreach (var ((m, f), p) in raw)
        {
            if (p.Distance < 2 || m - f < 2 || p.Same == p.Other) continue;
            bool composed = false, linked = true;
            for (int k = f; k < m && linked; k++)
            {
                if (!raw.TryGetValue((k + 1, k), out var near) || near.Same == near.Other) linked = false;
                else composed ^= near.Other > near.Same;
            }
            if (!linked) continue;
            checks[p.Distance]++;
            if ((p.Other > p.Same) == composed) agree[p.Distance]++;
        }
        for (int d = 2; d <= MaxReach; d++)
            if (checks[d] >= MinReliabilityChecks) factor[d] = Math.Clamp(2.0 * agree[d] / checks[d] - 1, 0, 1);
        return factor;
    }

    /// <summary>Per section and side (0 face up, 1 face down): the face-up prior plus the template's vote for that side.</summary>
    private static double[,] Unary(int count, IReadOnlyList<SideVote?>? votes, bool templateMirrored)
    {
        var u = new double[count, 2];
        for (int i = 0; i < count; i++)
        {
            u[i, 1] = -FaceDownCost;
            if (votes?[i] is not { } v) continue;
            // Face up looks unmirrored on the template unless the whole series is mirrored on it.
            u[i, 0] += templateMirrored ? v.Mirrored : v.Unmirrored;
            u[i, 1] += templateMirrored ? v.Unmirrored : v.Mirrored;
        }
        return u;
    }

    /// <summary>The best sides and their total score, by dynamic programming over the sides of the last <see cref="MaxReach"/> sections.</summary>
    private static (bool[] Flipped, double Total) Viterbi(int count, Dictionary<(int, int), (double Same, double Other)> scores, double[,] unary)
    {
        int k = Math.Min(MaxReach, count - 1); // sides remembered: the last k sections
        int states = 1 << Math.Max(k, 1);
        // State after position i: bits b = side of sections i, i−1, …, i−k+1 (bit 0 = section i; 1 = face down).
        var best = new double[states];
        Array.Fill(best, double.NegativeInfinity);
        best[0] = unary[0, 0];
        best[1] = unary[0, 1];
        var back = new int[count][];
        for (int i = 1; i < count; i++)
        {
            var next = new double[states];
            Array.Fill(next, double.NegativeInfinity);
            back[i] = new int[states];
            for (int s = 0; s < states; s++)
            {
                if (double.IsNegativeInfinity(best[s])) continue;
                for (int side = 0; side < 2; side++)
                {
                    double gain = unary[i, side];
                    for (int d = 1; d <= Math.Min(MaxReach, i); d++)
                    {
                        if (!scores.TryGetValue((i, i - d), out var sc)) continue;
                        int previous = (s >> (d - 1)) & 1;
                        gain += side == previous ? sc.Same : sc.Other;
                    }
                    int t = ((s << 1) | side) & (states - 1);
                    if (best[s] + gain > next[t]) { next[t] = best[s] + gain; back[i][t] = s; }
                }
            }
            best = next;
        }
        double total = best.Max();
        int state = Array.IndexOf(best, total);
        var flipped = new bool[count];
        for (int i = count - 1; i >= 1; i--)
        {
            flipped[i] = (state & 1) == 1;
            state = back[i][state];
        }
        flipped[0] = (state & 1) == 1;
        return (flipped, total);
    }
}
