using StackBuild.Geometry;
using StackBuild.Numerics;
using StackBuild.Register;

namespace StackBuild.Solve;

public sealed record SmoothingOptions
{
    /// <summary>
    /// Strength λ of the smoothness term (dimensionless, relative to one full-confidence pair); 0 solves with the
    /// robust consistency of all pairs only (the default). The solve runs only when a build chooses it
    /// (<c>PlacementSolver.Smoothing</c>); the plain neighbour chain is the default.
    /// Why the chain is the default: on the demo and on a public MRI series the solve does not beat the chain; the chain's
    /// drift is slow or biased link error, not noise that more pairs average out (docs/drift-and-frame.md). λ &gt; 0
    /// penalises the curvature of the correction; a chain error from one bad pair is a step, which that term resists
    /// (measured in docs/drift-and-frame.md).
    /// </summary>
    public double Strength { get; init; }
    /// <summary>Gauss–Newton iterations (each one also updates the robust weights).</summary>
    public int Iterations { get; init; } = 6;
    /// <summary>Tukey biweight cut-off in robust standard deviations of the pair residuals (4.685 is the usual 95 %-efficiency value).</summary>
    public double TukeyC { get; init; } = 4.685;
    /// <summary>The cut-off is never below this many registration pixels (pairs that agree this well are never outliers).</summary>
    public double MinCutoffPx { get; init; } = 1.0;
    /// <summary>
    /// Second-neighbour pairs count this much (relative to a nearest pair of the same confidence) when they disagree
    /// with the chain systematically (<see cref="SlowClosureMargin"/>); otherwise they count fully.
    /// </summary>
    public double BiasedLongPairWeight { get; init; } = 0.01;
    /// <summary>
    /// The second-neighbour pairs are taken to be biased against the chain when the slow share of the route closures
    /// (their moving average over <see cref="ClosureWindow"/> triangles; see <see cref="SmoothingSolver"/>) exceeds
    /// 0.18 + SlowClosureMargin / √(number of triangles). 0.18 is what independent pair errors give, and with a margin
    /// of 1 few series with independent errors are taken for biased (those keep the chain, which costs only the
    /// averaging); the measurements are in docs/drift-and-frame.md.
    /// </summary>
    public double SlowClosureMargin { get; init; } = 1.0;
    public int ClosureWindow { get; init; } = 9;
    /// <summary>Pairs below this confidence are not used.</summary>
    public double MinConfidence { get; init; } = 0.2;
}

/// <summary>One pairwise registration as an observation: moving section → fixed section (stack indices).</summary>
public sealed record PairObservation(int Moving, int Fixed, PairResult Result);

/// <summary>What the solver did with one pair.</summary>
/// <param name="Weight">Final weight in [0, 1]: confidence × robust weight.</param>
/// <param name="ResidualPx">Root mean square disagreement (registration pixels, over the section's sample points) between the pair's map and the solution.</param>
/// <param name="UsedRunnerUp">True when the runner-up hypothesis replaced the best one.</param>
/// <param name="Outlier">Why the pair was set aside, or null.</param>
public sealed record PairDecision(int Moving, int Fixed, double Confidence, double Weight, double ResidualPx, bool UsedRunnerUp, string? Outlier);

/// <param name="ToReference">Solved map of each section (registration pixels → reference frame); the chain's for sections not solved.</param>
/// <param name="CorrectionPx">How far (registration pixels, at the section's centre) the solution moved each section from the chain.</param>
/// <param name="SlowClosureShare">Share of the route closures that is slow (NaN when there were too few triangles to tell).</param>
/// <param name="SlowClosureLimit">The share above which the second-neighbour pairs were weighted down.</param>
/// <param name="LongPairWeight">The weight second-neighbour pairs were given (1, or <see cref="SmoothingOptions.BiasedLongPairWeight"/>).</param>
public sealed record SmoothingResult(IReadOnlyList<Transform2D> ToReference, IReadOnlyList<double> CorrectionPx, IReadOnlyList<PairDecision> Pairs,
    double SlowClosureShare = double.NaN, double SlowClosureLimit = double.PositiveInfinity, double LongPairWeight = 1);

/// <summary>
/// Reference-free solution of all section placements at once: least squares over every pairwise registration
/// (first and second neighbours, weighted by confidence and by robust weights) plus a smoothness term on the
/// sequence of corrections, in the spirit of transformation diffusion (Casero et al. 2017, Med. Image Anal.
/// 38:184): the stack is pulled towards what all its pairs agree on, not only the chain of nearest ones.
/// </summary>
/// <remarks>
/// <para>Each section i keeps its mirror from the chain and gets a small rigid correction δᵢ = (θᵢ, tᵢ) applied in
/// the reference frame about its centre. Pair (m, f) with map P says Tₘ(p) = T_f(P(p)) for sample points p spread
/// over section m; its residuals are linear in (δₘ, δ_f) after linearising about the current solution, so every
/// Gauss–Newton step is a banded least-squares system (half bandwidth 3·(largest pair distance) + 2) solved by a
/// banded Cholesky factorisation in O(N).</para>
/// <para>The smoothness term penalises the second difference δᵢ₋₁ − 2δᵢ + δᵢ₊₁ of the corrections at the sample
/// points: drift is slow, so the correction that removes it is smooth; a correction that is zero when the pairs
/// agree adds no pull towards straight structure (the banana effect of neighbour consistency is not made worse).</para>
/// <para>Outliers: Tukey biweight IRLS (Beaton &amp; Tukey 1974, Technometrics 16:147) on the per-pair RMS residual,
/// scale from the median absolute residual. A pair whose residual is beyond the cut-off is retried with its
/// runner-up hypothesis (same handedness only) and keeps it when that agrees; otherwise it gets weight 0 and is
/// reported with the reason. One wild pair cannot bend the rest because the second-neighbour pairs bridge it.</para>
/// <para>Biased second neighbours: before solving, the route closures (second-neighbour pair against the two nearest
/// pairs it spans) are tested for a slow part (<see cref="SmoothingOptions.SlowClosureMargin"/>). When tissue changes
/// shape between sections, a pair two sections apart errs more than twice a nearest pair, the same way over a stretch,
/// and at full weight those pairs bend the stack further than the chain (demo +7 %, MRI +21 % drift); they are then
/// weighted down so that they bridge outliers but do not set the course.</para>
/// </remarks>
public static class SmoothingSolver
{
    private const double GaugeWeight = 1e6;
    private const double Damping = 1e-9;

    /// <summary>
    /// <paramref name="chain"/> gives each section's starting map (registration pixels → reference frame), or null for
    /// sections that are not placed (they stay null in the sense of being returned unchanged); <paramref name="reference"/>
    /// is kept fixed. <paramref name="samplePoints"/>(i) are points of section i (registration pixels) the residuals
    /// are measured at (the corners of the middle half and the centre suit).
    /// </summary>
    public static SmoothingResult Solve(IReadOnlyList<Transform2D?> chain, int reference, IReadOnlyList<PairObservation> pairs,
        Func<int, (double X, double Y)[]> samplePoints, SmoothingOptions options)
    {
        int count = chain.Count;
        var solved = chain.Select(c => c ?? Transform2D.Identity).ToArray();
        var placed = chain.Select(c => c is not null).ToArray();
        var usable = pairs.Where(p => placed[p.Moving] && placed[p.Fixed] && p.Moving != p.Fixed).ToList();
        var maps = usable.Select(p => p.Result.Best.MovingToFixed).ToArray();
        var runnerUsed = new bool[usable.Count];
        var robust = Enumerable.Repeat(1.0, usable.Count).ToArray();
        var residual = new double[usable.Count];
        var outlier = new string?[usable.Count];
        var points = Enumerable.Range(0, count).Select(samplePoints).ToArray();
        var centres = points.Select(ps => (X: ps.Average(p => p.X), Y: ps.Average(p => p.Y))).ToArray();
        int span = usable.Count == 0 ? 1 : Math.Max(1, usable.Max(p => Math.Abs(p.Moving - p.Fixed)));
        if (options.Strength > 0) span = Math.Max(span, 2);
        int band = 3 * span + 2;

        var suspect = RouteCheck(usable, maps, runnerUsed, points, options);
        double slowShare = SlowClosureShare(usable, maps, suspect, solved, points, options, out int slowTriangles);
        double longWeight = slowShare > SlowShareLimit(slowTriangles, options) ? options.BiasedLongPairWeight : 1;
        for (int iteration = 0; iteration <= options.Iterations; iteration++)
        {
            // Residuals and robust weights at the current solution. The first solve uses the route check alone: the
            // chain it starts from fits every nearest-neighbour pair exactly, so residuals there say nothing yet.
            for (int k = 0; k < usable.Count; k++) residual[k] = PairResidual(usable[k], maps[k], solved, points);
            double scale = RobustScale(residual, usable, options.MinConfidence);
            double cutoff = Math.Max(options.MinCutoffPx, options.TukeyC * scale);
            for (int k = 0; k < usable.Count; k++)
            {
                var p = usable[k];
                outlier[k] = null;
                if (p.Result.Confidence < options.MinConfidence) { robust[k] = 0; outlier[k] = "confidence below the minimum"; continue; }
                if (iteration == 0)
                {
                    robust[k] = suspect[k] ? 0 : 1;
                    continue;
                }
                if (residual[k] > cutoff && !runnerUsed[k] && p.Result.RunnerUp is { } ru && ru.MovingToFixed.IsMirrored == maps[k].IsMirrored)
                {
                    double r = PairResidual(p, ru.MovingToFixed, solved, points);
                    if (r <= cutoff)
                    {
                        maps[k] = ru.MovingToFixed;
                        runnerUsed[k] = true;
                        residual[k] = r;
                    }
                }
                double u = residual[k] / cutoff;
                robust[k] = u >= 1 ? 0 : (1 - u * u) * (1 - u * u);
                if (robust[k] == 0)
                    outlier[k] = (suspect[k] ? "disagrees with the route through the second neighbour and " : "") +
                        $"disagrees with the solution by {residual[k]:0.#} px (cut-off {cutoff:0.#} px)" +
                        (p.Result.RunnerUp is null || runnerUsed[k] ? "" : "; the runner-up hypothesis does not fit either");
            }
            if (iteration == options.Iterations) break;

            var system = new BandedSystem(3 * count, band);
            for (int k = 0; k < usable.Count; k++)
            {
                double w = robust[k] * usable[k].Result.Confidence * (Math.Abs(usable[k].Moving - usable[k].Fixed) > 1 ? longWeight : 1);
                if (w <= 0) continue;
                AddPair(system, usable[k], maps[k], w, solved, points, centres);
            }
            if (options.Strength > 0) AddSmoothness(system, options.Strength, placed, chain, solved, points, centres);
            for (int i = 0; i < count; i++)
            for (int c = 0; c < 3; c++)
                system.AddDiagonal(3 * i + c, !placed[i] || i == reference ? GaugeWeight : Damping);
            var delta = system.Solve();
            for (int i = 0; i < count; i++)
            {
                if (!placed[i] || i == reference) continue;
                var c = solved[i].Apply(centres[i].X, centres[i].Y);
                solved[i] = solved[i].Then(Correction(delta[3 * i], delta[3 * i + 1], delta[3 * i + 2], c));
            }
        }

        var correction = new double[count];
        for (int i = 0; i < count; i++)
        {
            if (chain[i] is not { } start) { solved[i] = Transform2D.Identity; continue; }
            var a = start.Apply(centres[i].X, centres[i].Y);
            var b = solved[i].Apply(centres[i].X, centres[i].Y);
            correction[i] = Math.Sqrt((a.X - b.X) * (a.X - b.X) + (a.Y - b.Y) * (a.Y - b.Y));
        }
        var decisions = usable.Select((p, k) => new PairDecision(p.Moving, p.Fixed, p.Result.Confidence,
            robust[k] * p.Result.Confidence, residual[k], runnerUsed[k], outlier[k])).ToList();
        return new SmoothingResult(solved, correction, decisions, slowShare, SlowShareLimit(slowTriangles, options), longWeight);
    }

    /// <summary>A small rigid map: rotation by θ (radians) about c, then a shift by t.</summary>
    private static Transform2D Correction(double theta, double tx, double ty, (double X, double Y) c) =>
        Transform2D.Rotation(theta * 180 / Math.PI, c.X, c.Y).Then(Transform2D.Translation(tx, ty));

    private static double PairResidual(PairObservation p, Transform2D map, Transform2D[] solved, (double X, double Y)[][] points)
    {
        double sum = 0;
        var ps = points[p.Moving];
        foreach (var (x, y) in ps)
        {
            var a = solved[p.Moving].Apply(x, y);
            var q = map.Apply(x, y);
            var b = solved[p.Fixed].Apply(q.X, q.Y);
            sum += (a.X - b.X) * (a.X - b.X) + (a.Y - b.Y) * (a.Y - b.Y);
        }
        return Math.Sqrt(sum / ps.Length);
    }

    /// <summary>
    /// The route check: for every triangle (a, a − 1, a − 2) of pairs, the map a → a − 1 → a − 2 should equal the
    /// direct map a → a − 2. A nearest-neighbour pair whose triangles (at least two) all fail to close is suspect; a
    /// second-neighbour pair is suspect when its triangle fails and neither nearest pair in it explains that. A
    /// suspect pair with a runner-up that closes its triangles takes the runner-up.
    /// </summary>
    private static bool[] RouteCheck(List<PairObservation> usable, Transform2D[] maps, bool[] runnerUsed, (double X, double Y)[][] points,
        SmoothingOptions options)
    {
        var index = new Dictionary<(int, int), int>();
        for (int k = 0; k < usable.Count; k++)
            if (usable[k].Result.Confidence >= options.MinConfidence) index[(usable[k].Moving, usable[k].Fixed)] = k;
        // Triangles by their second-neighbour pair: (a, a−2) with (a, a−1) and (a−1, a−2).
        var triangles = index.Keys.Where(key => key.Item1 - key.Item2 == 2 && index.ContainsKey((key.Item1, key.Item1 - 1)) && index.ContainsKey((key.Item1 - 1, key.Item2)))
            .Select(key => (Direct: index[key], First: index[(key.Item1, key.Item1 - 1)], Second: index[(key.Item1 - 1, key.Item2)], Section: key.Item1))
            .ToList();
        var suspect = new bool[usable.Count];
        if (triangles.Count == 0) return suspect;
        double Closure((int Direct, int First, int Second, int Section) t)
        {
            var route = maps[t.First].Then(maps[t.Second]);
            return Math.Sqrt(points[t.Section].Average(p =>
            {
                var a = route.Apply(p.X, p.Y);
                var b = maps[t.Direct].Apply(p.X, p.Y);
                return (a.X - b.X) * (a.X - b.X) + (a.Y - b.Y) * (a.Y - b.Y);
            }));
        }
        var closure = triangles.Select(Closure).ToArray();
        double cutoff = Math.Max(options.MinCutoffPx, options.TukeyC * Quantiles.RobustSigmaUpper(closure));
        bool Bad(int t) => Closure(triangles[t]) > cutoff;

        var ofPair = new Dictionary<int, List<int>>();
        for (int t = 0; t < triangles.Count; t++)
            foreach (int k in new[] { triangles[t].First, triangles[t].Second })
                (ofPair.TryGetValue(k, out var list) ? list : ofPair[k] = []).Add(t);
        foreach (var (k, list) in ofPair)
        {
            if (list.Count < 2 || !list.All(Bad)) continue;
            suspect[k] = true;
            if (usable[k].Result.RunnerUp is { } ru && ru.MovingToFixed.IsMirrored == maps[k].IsMirrored)
            {
                var kept = maps[k];
                maps[k] = ru.MovingToFixed;
                if (list.All(t => !Bad(t))) { runnerUsed[k] = true; suspect[k] = false; }
                else maps[k] = kept;
            }
        }
        for (int t = 0; t < triangles.Count; t++)
        {
            var tri = triangles[t];
            if (Bad(t) && !suspect[tri.First] && !suspect[tri.Second] && !runnerUsed[tri.First] && !runnerUsed[tri.Second])
                suspect[tri.Direct] = true;
        }
        return suspect;
    }

    /// <summary>
    /// How much of the route closures is slow. For every triangle (a, a − 1, a − 2) whose pairs are not suspect, the
    /// closure is the difference, in the reference frame at the sample points, between where the route a → a − 1 → a − 2
    /// and the direct pair a → a − 2 put section a. Independent pair errors make closures that vary from triangle to
    /// triangle (neighbouring closures share one nearest pair, lag-1 correlation σ₁²/(2σ₁² + σ₂²), 1/3 at equal error
    /// sizes; simulated, about 0.145 results when σ₂ = 2σ₁ and 0.21 when σ₂ = 0.3σ₁), so their
    /// moving average over 9 triangles keeps about (1 + 2·(8/9)·(1/3))/9 ≈ 0.18 of their power. Tissue that changes
    /// shape between sections makes a pair two sections apart err more than twice a nearest pair, the same way over a
    /// stretch of sections: the closures then share a slow part and the share grows towards 1. Measured (2026-12-02):
    /// demo series 0.35, MRI series 0.76, independent synthetic errors median 0.18.
    /// </summary>
    private static double SlowClosureShare(List<PairObservation> usable, Transform2D[] maps, bool[] suspect, Transform2D[] solved,
        (double X, double Y)[][] points, SmoothingOptions options, out int triangles)
    {
        var index = new Dictionary<(int, int), int>();
        for (int k = 0; k < usable.Count; k++)
            if (usable[k].Result.Confidence >= options.MinConfidence && !suspect[k]) index[(usable[k].Moving, usable[k].Fixed)] = k;
        var closures = new List<double[]>();
        foreach (var (a, f) in index.Keys.Where(key => key.Item1 - key.Item2 == 2).OrderBy(key => key.Item1))
        {
            if (!index.TryGetValue((a, a - 1), out int first) || !index.TryGetValue((a - 1, f), out int second)) continue;
            var route = maps[first].Then(maps[second]);
            var direct = maps[index[(a, f)]];
            var c = new double[2 * points[a].Length];
            for (int p = 0; p < points[a].Length; p++)
            {
                var u = route.Then(solved[f]).Apply(points[a][p].X, points[a][p].Y);
                var v = direct.Then(solved[f]).Apply(points[a][p].X, points[a][p].Y);
                c[2 * p] = u.X - v.X;
                c[2 * p + 1] = u.Y - v.Y;
            }
            closures.Add(c);
        }
        triangles = closures.Count;
        if (closures.Count < options.ClosureWindow) return double.NaN;
        int half = options.ClosureWindow / 2;
        double slow = 0, all = 0;
        for (int t = 0; t < closures.Count; t++)
        {
            int lo = Math.Max(0, t - half), hi = Math.Min(closures.Count - 1, t + half);
            for (int d = 0; d < closures[t].Length; d++)
            {
                double mean = 0;
                for (int j = lo; j <= hi; j++) mean += closures[j][d];
                mean /= hi - lo + 1;
                slow += mean * mean;
                all += closures[t][d] * closures[t][d];
            }
        }
        return all > 0 ? slow / all : 0;
    }

    /// <summary>Expected slow share of independent closures.</summary>
    public const double IndependentSlowShare = 0.18;

    /// <summary>The slow share above which second-neighbour pairs are taken to be biased (<see cref="SmoothingOptions.SlowClosureMargin"/>).</summary>
    public static double SlowShareLimit(int triangles, SmoothingOptions options) =>
        triangles <= 0 ? double.PositiveInfinity : IndependentSlowShare + options.SlowClosureMargin / Math.Sqrt(triangles);

    /// <summary>
    /// <see cref="Quantiles.RobustSigmaUpper"/> of the residuals of the pairs in use (a consistent estimate of σ for Gaussian
    /// residuals).
    /// </summary>
    private static double RobustScale(double[] residual, List<PairObservation> usable, double minConfidence) =>
        Quantiles.RobustSigmaUpper(residual.Where((_, k) => usable[k].Result.Confidence >= minConfidence));

    /// <summary>Jacobian row of a reference-frame point q of section i with respect to (θᵢ, txᵢ, tyᵢ).</summary>
    private static (double Theta, double Tx) RowX((double X, double Y) q, (double X, double Y) c) => (-(q.Y - c.Y), 1);

    private static (double Theta, double Ty) RowY((double X, double Y) q, (double X, double Y) c) => (q.X - c.X, 1);

    private static void AddPair(BandedSystem system, PairObservation p, Transform2D map, double weight, Transform2D[] solved,
        (double X, double Y)[][] points, (double X, double Y)[] centres)
    {
        var cm = solved[p.Moving].Apply(centres[p.Moving].X, centres[p.Moving].Y);
        var cf = solved[p.Fixed].Apply(centres[p.Fixed].X, centres[p.Fixed].Y);
        double w = weight / points[p.Moving].Length;
        foreach (var (x, y) in points[p.Moving])
        {
            var qm = solved[p.Moving].Apply(x, y);
            var inFixed = map.Apply(x, y);
            var qf = solved[p.Fixed].Apply(inFixed.X, inFixed.Y);
            // r = δₘ(qₘ) − δ_f(q_f) + (qₘ − q_f), component by component.
            var mx = RowX(qm, cm); var fx = RowX(qf, cf);
            system.AddRow(w, [(3 * p.Moving, mx.Theta), (3 * p.Moving + 1, mx.Tx), (3 * p.Fixed, -fx.Theta), (3 * p.Fixed + 1, -fx.Tx)], -(qm.X - qf.X));
            var my = RowY(qm, cm); var fy = RowY(qf, cf);
            system.AddRow(w, [(3 * p.Moving, my.Theta), (3 * p.Moving + 2, my.Ty), (3 * p.Fixed, -fy.Theta), (3 * p.Fixed + 2, -fy.Ty)], -(qm.Y - qf.Y));
        }
    }

    /// <summary>
    /// λ Σ ‖dᵢ₋₁(q) − 2dᵢ(q) + dᵢ₊₁(q)‖² at reference-frame points q of section i, where dⱼ(q) is the total
    /// displacement the solution applies to section j's chain placement at q (so far, plus this step's δⱼ).
    /// </summary>
    private static void AddSmoothness(BandedSystem system, double strength, bool[] placed, IReadOnlyList<Transform2D?> chain,
        Transform2D[] solved, (double X, double Y)[][] points, (double X, double Y)[] centres)
    {
        int count = placed.Length;
        var chainInverse = chain.Select(c => c?.Inverse()).ToArray();
        for (int i = 1; i < count - 1; i++)
        {
            if (!placed[i - 1] || !placed[i] || !placed[i + 1]) continue;
            double w = strength / points[i].Length;
            foreach (var (x, y) in points[i])
            {
                var q = chain[i]!.Value.Apply(x, y);
                var rowX = new List<(int, double)>();
                var rowY = new List<(int, double)>();
                double sx = 0, sy = 0;
                foreach (var (j, factor) in new[] { (i - 1, 1.0), (i, -2.0), (i + 1, 1.0) })
                {
                    var inSection = chainInverse[j]!.Value.Apply(q.X, q.Y);
                    var now = solved[j].Apply(inSection.X, inSection.Y);
                    sx += factor * (now.X - q.X);
                    sy += factor * (now.Y - q.Y);
                    var c = solved[j].Apply(centres[j].X, centres[j].Y);
                    var rx = RowX(now, c); var ry = RowY(now, c);
                    rowX.Add((3 * j, factor * rx.Theta)); rowX.Add((3 * j + 1, factor * rx.Tx));
                    rowY.Add((3 * j, factor * ry.Theta)); rowY.Add((3 * j + 2, factor * ry.Ty));
                }
                system.AddRow(w, [.. rowX], -sx);
                system.AddRow(w, [.. rowY], -sy);
            }
        }
    }
}

/// <summary>
/// A symmetric positive definite banded system AᵀWA x = AᵀWb built row by row, solved by banded Cholesky
/// factorisation (O(n·b²) for n unknowns and half bandwidth b).
/// </summary>
internal sealed class BandedSystem(int size, int halfBandwidth)
{
    // Lower band: _a[i, d] = A[i, i − d], d = 0..halfBandwidth.
    private readonly double[,] _a = new double[size, halfBandwidth + 1];
    private readonly double[] _b = new double[size];

    /// <summary>Adds weight·(row·x − rhs)² to the cost; row entries as (unknown, coefficient).</summary>
    public void AddRow(double weight, (int Index, double Value)[] row, double rhs)
    {
        foreach (var (i, vi) in row)
        {
            _b[i] += weight * vi * rhs;
            foreach (var (j, vj) in row)
            {
                if (j > i) continue;
                if (i - j > halfBandwidth) throw new InvalidOperationException("row outside the band");
                _a[i, i - j] += weight * vi * vj;
            }
        }
    }

    public void AddDiagonal(int i, double value) => _a[i, 0] += value;

    public double[] Solve()
    {
        int n = size, b = halfBandwidth;
        var l = new double[n, b + 1];
        for (int i = 0; i < n; i++)
        {
            for (int j = Math.Max(0, i - b); j <= i; j++)
            {
                double sum = _a[i, i - j];
                for (int k = Math.Max(0, i - b); k < j; k++)
                    if (j - k <= b) sum -= l[i, i - k] * l[j, j - k];
                if (i == j)
                {
                    if (sum <= 0) throw new InvalidOperationException("the solve system is not positive definite");
                    l[i, 0] = Math.Sqrt(sum);
                }
                else l[i, i - j] = sum / l[j, 0];
            }
        }
        var y = new double[n];
        for (int i = 0; i < n; i++)
        {
            double sum = _b[i];
            for (int k = Math.Max(0, i - b); k < i; k++) sum -= l[i, i - k] * y[k];
            y[i] = sum / l[i, 0];
        }
        var x = new double[n];
        for (int i = n - 1; i >= 0; i--)
        {
            double sum = y[i];
            for (int k = i + 1; k <= Math.Min(n - 1, i + b); k++) sum -= l[k, k - i] * x[k];
            x[i] = sum / l[i, 0];
        }
        return x;
    }
}
