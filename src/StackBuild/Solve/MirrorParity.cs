using StackBuild.Register;

namespace StackBuild.Solve;

/// <summary>Which sections lie turned over relative to the first, decided for the whole stack at once.</summary>
/// <param name="Flipped">Per section (stack order): true when it lies mirrored relative to section 0.</param>
/// <param name="Margin">
/// Per section: how much the stack's total agreement (weighted NCC) would drop if this section alone were turned the other
/// way (≥ 0); near 0 means the stack cannot tell which side of this section is up.
/// </param>
/// <param name="Overruled">Pairs whose own best hypothesis had the other mirror than the stack decided.</param>
public sealed record ParityResult(bool[] Flipped, double[] Margin, IReadOnlyList<(int Moving, int Fixed)> Overruled);

/// <summary>
/// Decides every section's mounting side (face up or face down, up to one flip of the whole stack) from every
/// registered pair at once, instead of composing the pairs' own decisions along a chain, where one wrong decision at a
/// weak link would turn over every section after it. Each pair (i, j) scores both relative mirrors by the NCC of its
/// best hypothesis with that mirror; the decision maximises the weighted sum of the scores of the chosen relative
/// mirrors over all pairs. The pairs reach at most <see cref="MaxReach"/> sections, so the exact maximum is found by
/// dynamic programming over the mounting sides of the last sections (the Viterbi algorithm; Viterbi 1967, IEEE Trans.
/// Inf. Theory 13:260; Forney 1973, Proc. IEEE 61:268).
/// </summary>
public static class MirrorParity
{
    /// <summary>The furthest pair (in stack positions) the decision uses.</summary>
    public const int MaxReach = 3;

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

    /// <summary>
    /// <paramref name="pairs"/>: (moving, fixed) → result, moving &gt; fixed, stack positions. A pair whose other mirror
    /// was not tried (the manifest said how both were mounted) forces its relative mirror. A pair whose both sides
    /// score below 0.1 NCC says nothing.
    /// </summary>
    private static double Score(double ncc) => double.IsNegativeInfinity(ncc) ? ncc : Evidence(ncc);

    public static ParityResult Decide(int count, IReadOnlyDictionary<(int Moving, int Fixed), PairResult> pairs)
    {
        if (count == 0) return new ParityResult([], [], []);
        // score[(i, j)] = (NCC if same side, NCC if other side), weighted; −∞ where a side was not tried.
        var scores = new Dictionary<(int, int), (double Same, double Other)>();
        foreach (var ((m, f), r) in pairs)
        {
            int d = m - f;
            if (d < 1 || d > MaxReach) continue;
            double same = r.NccFor(false) ?? double.NegativeInfinity, other = r.NccFor(true) ?? double.NegativeInfinity;
            if (Math.Max(same, other) < 0.1) continue;
            scores[(m, f)] = (Weight(d) * Score(same), Weight(d) * Score(other));
        }
        int k = Math.Min(MaxReach, count - 1); // sides remembered: the last k sections
        int states = 1 << Math.Max(k, 0);
        // State after position i: bits b = side of sections i, i−1, …, i−k+1 (bit 0 = section i). Section 0 is face up (side 0).
        var best = new double[states];
        Array.Fill(best, double.NegativeInfinity);
        best[0] = 0;
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
                    double gain = 0;
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
        int state = Array.IndexOf(best, best.Max());
        var flipped = new bool[count];
        for (int i = count - 1; i >= 1; i--)
        {
            flipped[i] = (state & 1) == 1;
            state = back[i][state];
        }
        flipped[0] = false;
        // Parts of the stack that no scored pair links (a run of sections that match nothing) cannot be told apart: each
        // part is turned so that most of its sections lie as the part's majority does (most sections are mounted face up;
        // common practice).
        foreach (var part in Parts(count, scores.Keys))
        {
            if (part.Count(i => flipped[i]) * 2 > part.Count)
                foreach (int i in part) flipped[i] = !flipped[i];
        }

        var margin = new double[count];
        for (int i = 0; i < count; i++)
        {
            double change = 0;
            foreach (var ((m, f), sc) in scores)
            {
                if (m != i && f != i) continue;
                bool relative = flipped[m] != flipped[f];
                change += (relative ? sc.Other : sc.Same) - (relative ? sc.Same : sc.Other);
            }
            margin[i] = double.IsFinite(change) ? change : double.PositiveInfinity;
        }
        var overruled = pairs.Where(kv => kv.Key.Moving - kv.Key.Fixed <= MaxReach && kv.Value.OtherMirror is not null
                                          && kv.Value.Best.Mirrored != (flipped[kv.Key.Moving] != flipped[kv.Key.Fixed]))
            .Select(kv => kv.Key).OrderBy(k2 => k2.Moving).ThenBy(k2 => k2.Fixed).ToList();
        return new ParityResult(flipped, margin, overruled);
    }

    /// <summary>Runs of consecutive sections joined by at least one scored pair across every boundary between them.</summary>
    private static List<List<int>> Parts(int count, IEnumerable<(int Moving, int Fixed)> links)
    {
        var reach = new int[count]; // reach[i]: the furthest section a scored pair from section ≤ i reaches
        for (int i = 0; i < count; i++) reach[i] = i;
        foreach (var (m, f) in links) reach[f] = Math.Max(reach[f], m);
        var parts = new List<List<int>>();
        var current = new List<int>();
        int furthest = 0;
        for (int i = 0; i < count; i++)
        {
            if (i > furthest && current.Count > 0) { parts.Add(current); current = []; }
            current.Add(i);
            furthest = Math.Max(furthest, reach[i]);
        }
        if (current.Count > 0) parts.Add(current);
        return parts;
    }
}
