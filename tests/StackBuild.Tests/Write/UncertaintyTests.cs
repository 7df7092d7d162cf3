using System.Globalization;
using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Pipeline;
using StackBuild.Solve;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>The per-section error estimate: how it accumulates, Spearman against SciPy, and (soak) against the demo's truth.</summary>
public sealed class UncertaintyTests(ITestOutputHelper output)
{
    private static SectionRecord Link(int number, int? to, double confidence, double psr, double? disagreementUm) => new()
    {
        Number = number, Status = SectionOutcome.Aligned, RegisteredTo = to, Route = to is null ? LinkRoute.Reference : LinkRoute.Neighbour,
        Confidence = to is null ? null : confidence, PeakToSidelobe = to is null ? null : psr, RouteDisagreementUm = disagreementUm,
    };

    private static BuildRecord Record(params SectionRecord[] sections) => new()
    {
        Aligned = true,
        Dimensions = [100, 80, sections.Length], VoxelSizeMm = [0.01, 0.01, 0.05],
        Parameters = new() { RegistrationPixelSizeUm = 10 }, Sections = [.. sections],
    };

    [Fact]
    public void LinkErrorsAddInQuadratureAlongTheChain()
    {
        // 1 is the reference; 2 → 1 (sharp peak, confident); 3 → 2 with a route disagreement; 4 a gap; 5 → 3 at low confidence.
        var record = Record(
            Link(1, null, 1, 1, null),
            Link(2, 1, 1, 25, null),
            Link(3, 2, 1, 25, 30 * Math.Sqrt(2)),
            new SectionRecord { Number = 4, Status = SectionOutcome.Gap },
            Link(5, 3, 0.6, 4, null));
        var e = Uncertainty.Estimate(record);
        // Without a template each estimate also carries the chain's slow drift: placed sections 1, 2, 3, 5 are positions
        // 0..3 of 3 links, 10 µm registration pixels.
        double Drift(int t) => Uncertainty.DriftError(t, 3) * 10;
        Assert.Equal(10 / 5.0, e[2].LinkUm, 9); // 10 µm pixel / √25
        Assert.Equal(Math.Sqrt(2 * 2 + 30 * 30), e[3].LinkUm, 9);
        double gross = 0.4 * Uncertainty.GrossErrorFraction * 1000; // extent 100 × 10 µm
        Assert.Equal(Math.Sqrt(5 * 5 + gross * gross), e[5].LinkUm, 9);
        // The walk as one global fit sees it: links 2, 3, 5 lie on the paths of 3, 2 and 1 of the 4 sections (shares 3/4,
        // 1/2, 1/4); section 5's path holds all three, so each counts (1 − share)², and the reference's holds none, each share².
        double l2 = e[2].LinkUm * e[2].LinkUm, l3 = e[3].LinkUm * e[3].LinkUm, l5 = e[5].LinkUm * e[5].LinkUm;
        Assert.Equal(Math.Sqrt(l2 / 16 + l3 / 4 + l5 * 9 / 16 + Drift(3) * Drift(3)), e[5].AccumulatedUm, 9);
        Assert.Equal(Math.Sqrt(l2 * 9 / 16 + l3 / 4 + l5 / 16 + Drift(0) * Drift(0)), e[1].AccumulatedUm, 9);
        Assert.False(e.ContainsKey(4));
        var annotated = Uncertainty.Annotate(record);
        Assert.Null(annotated.Sections[3].EstimatedErrorUm);
        Assert.Equal(Math.Round(e[5].AccumulatedUm, 2), annotated.Sections[4].EstimatedErrorUm);
        // Sections placed without aligning have no estimate at all (rather than a misleading 0).
        Assert.Empty(Uncertainty.Estimate(record with { Aligned = false }));
    }

    [Fact]
    public void TheChainWalkAboutTheStacksMeanMatchesASimulatedGlobalFit()
    {
        // A chain of 41 sections with its reference at 15 (not the middle) and link errors of different sizes: WalkAboutMean's
        // variance for each section against 40,000 simulated chains whose placements are the sums of normal link errors
        // along the path to the reference, the mean over the stack taken off (what one global translation fit removes).
        // Independent of the formula: MathNet's normal sampler and plain sums.
        const int n = 41, reference = 15;
        var sd = Enumerable.Range(0, n).Select(i => i == reference ? 0 : 1 + 0.1 * (i % 7)).ToArray();
        var link = Enumerable.Range(0, n).ToDictionary(i => i, i => sd[i]);
        var paths = Enumerable.Range(0, n).ToDictionary(i => i, i =>
        {
            var path = new List<int>();
            for (int at = i; ; at += Math.Sign(reference - at)) { path.Add(at); if (at == reference) break; }
            return path;
        });
        var formula = Uncertainty.WalkAboutMean(paths, link);
        var random = new MathNet.Numerics.Distributions.Normal(0, 1, new Random(5));
        const int trials = 40_000;
        var sum2 = new double[n];
        var e = new double[n];
        var w = new double[n];
        for (int t = 0; t < trials; t++)
        {
            for (int i = 0; i < n; i++) e[i] = sd[i] * random.Sample();
            for (int i = 0; i < n; i++) w[i] = paths[i].Sum(k => e[k]);
            double mean = w.Average();
            for (int i = 0; i < n; i++) sum2[i] += (w[i] - mean) * (w[i] - mean);
        }
        for (int i = 0; i < n; i++)
            Assert.InRange(sum2[i] / trials / formula[i], 0.96, 1.04); // 40,000 trials: the variance's own sampling error is about 0.7 %
        Assert.True(formula[reference] > 1, $"the reference's variance after the fit is {formula[reference]:0.00}, not near zero");
    }

    [Fact]
    public void TheDriftOfAPlainBuildRunsOverTheWholeStackItsJoinedPartsIncluded()
    {
        // Sections 1–3 a part joined by a weak match (part 1, no estimate of their own), 4–8 the stack with the reference 6.
        // The drift is the whole stack's, seen after one global fit over all eight: section 6 sits at position 5 of 7 links,
        // not at position 2 of 4 (the stretch without the part), which would understate it.
        // (Links of negligible error, a peak-to-sidelobe ratio of 10¹², so that the estimates are the drift term alone.)
        var part = Enumerable.Range(1, 3).Select(n => Link(n, n + 1, 1, 1e12, null) with { Part = 1, ZIndex = n - 1 });
        var stack = new[] { Link(4, 5, 1, 1e12, null), Link(5, 6, 1, 1e12, null), Link(6, null, 1, 1, null), Link(7, 6, 1, 1e12, null), Link(8, 7, 1, 1e12, null) }
            .Select((s, t) => s with { ZIndex = t + 3 });
        var e = Uncertainty.Estimate(Record([.. part, .. stack]));
        Assert.Equal(Uncertainty.DriftError(5, 7) * 10, e[6].AccumulatedUm, 9);
        Assert.NotEqual(Uncertainty.DriftError(2, 4) * 10, e[6].AccumulatedUm, 6);
        Assert.False(e.ContainsKey(1)); // the part's own sections still have no estimate
    }

    [Fact]
    public void WithATemplateASectionPastTheLastUsedMatchCarriesTheLinksInBetween()
    {
        // A template-guided chain 1–6 (each registered to the one before, route disagreements 20, 40, 60 … µm): the template
        // matches of 1–3 were used (misfit 10 µm each), those of 4–6 set aside. The template's course reaches 6 only through
        // the links of 4 and 5, so their errors add to its estimate; 4, next to a used match, carries none of them.
        SectionRecord Guided(int number, bool used) => Link(number, number == 1 ? null : number - 1, 1, 1e12, 20 * number * Math.Sqrt(2)) with
        {
            ZIndex = number,
            Template = new SectionTemplateRecord { Matched = true, MisfitUm = 10, Outlier = used ? null : "set aside" },
        };
        var record = Record(Guided(1, true), Guided(2, true), Guided(3, true), Guided(4, false), Guided(5, false), Guided(6, false));
        var e = Uncertainty.Estimate(record);
        double template2 = 10 * 10 / 3.0; // RMS misfit of the three used matches, over √3
        Assert.Equal(Math.Sqrt(e[4].LinkUm * e[4].LinkUm + template2), e[4].AccumulatedUm, 6);
        Assert.Equal(Math.Sqrt(e[6].LinkUm * e[6].LinkUm + template2 + e[4].LinkUm * e[4].LinkUm + e[5].LinkUm * e[5].LinkUm), e[6].AccumulatedUm, 6);
        Assert.Equal(120, e[6].LinkUm, 3); // the route disagreement 120√2 µm, of which each route is taken to carry 1/√2
    }

    [Fact]
    public void ASectionCarriedWithARescuedOneTakesItsMatchAndTheLinksBetweenNotTheWrongRoute()
    {
        // Sections 1–6 guided by a template, 6 the reference, each registered towards it. Section 2's chain link went wrong
        // (its two routes 392 registration pixels apart, 3920 µm at 10 µm pixels), and the template rescued it
        // with its own match; section 1, registered to 2 with confidence 1 and inheriting 2's wrong route, was carried with
        // it (template.carried_with = 2), its match from the carried placement 15 µm off. Its estimate is 2's single-match
        // error, its own link's peak term and that misfit, not the route disagreement the carry undid.
        SectionRecord Guided(int number, double disagreementUm, SectionTemplateRecord t) =>
            Link(number, number == 6 ? null : number + 1, 1, 25, disagreementUm) with { ZIndex = number, Template = t };
        var used = new SectionTemplateRecord { Matched = true, MisfitUm = 10 };
        var record = Record(
            Guided(1, 3920, new SectionTemplateRecord { Matched = true, MisfitUm = 15, Outlier = "set aside", CarriedWith = 2 }),
            Guided(2, 3920, new SectionTemplateRecord { Matched = true, MisfitUm = 0, PlacedByTemplate = true }),
            Guided(3, 0, used), Guided(4, 0, used), Guided(5, 0, used), Guided(6, 0, used));
        var e = Uncertainty.Estimate(record);
        double single = 10; // RMS misfit of the four used matches within ±5, one match's error (not divided by √4)
        double peak = 10 / 5.0; // 10 µm pixel / √25, confidence 1: no gross term
        Assert.Equal(Math.Sqrt(single * single + peak * peak + 15 * 15), e[1].AccumulatedUm, 6);
        Assert.Equal(single, e[2].AccumulatedUm, 6);
        // Without carried_with the same section hangs on the wrong route: its estimate is the disagreement's, 200× larger.
        var uncarried = record with { Sections = [record.Sections[0] with { Template = record.Sections[0].Template! with { CarriedWith = null } }, .. record.Sections.Skip(1)] };
        Assert.True(Uncertainty.Estimate(uncarried)[1].AccumulatedUm > 2000);
        // A record whose walk does not reach the named section (edited by hand) keeps the chain's estimate.
        var broken = record with { Sections = [record.Sections[0] with { Template = record.Sections[0].Template! with { CarriedWith = 5 }, RegisteredTo = 6 }, .. record.Sections.Skip(1)] };
        Assert.True(Uncertainty.Estimate(broken)[1].AccumulatedUm > 2000);
    }

    [Fact]
    public void DriftIsARandomWalkSeenAfterOneGlobalFit()
    {
        // The drift term's variance N/3 − t + t²/N is the continuous limit of a discrete random walk of unit steps with
        // its mean over the stack removed. Checked against that walk's exact variance, from Cov(W_s, W_u) = min(s, u):
        // Var(W_t − mean W) = t − (2/(N+1)) Σ_u min(t, u) + (1/(N+1)²) Σ_s Σ_u min(s, u) (common practice; derived here).
        const int n = 60;
        double all = 0;
        for (int a = 0; a <= n; a++) for (int b = 0; b <= n; b++) all += Math.Min(a, b);
        all /= (n + 1.0) * (n + 1.0);
        foreach (int t in new[] { 0, 15, 30, 45, 60 })
        {
            double row = 0;
            for (int u = 0; u <= n; u++) row += Math.Min(t, u);
            double exact = t - 2 * row / (n + 1) + all;
            double model = Math.Pow(Uncertainty.DriftError(t, n) / Uncertainty.DriftPxPerLink, 2);
            Assert.InRange(model / exact, 0.9, 1.1);
        }
        // Smallest in the middle, largest at the ends, symmetric; none for a single section.
        Assert.True(Uncertainty.DriftError(30, 60) < Uncertainty.DriftError(10, 60));
        Assert.Equal(Uncertainty.DriftError(0, 60), Uncertainty.DriftError(60, 60), 9);
        Assert.Equal(0, Uncertainty.DriftError(0, 0));
    }

    [Theory]
    [InlineData("1,2,3,4,5", "5,6,7,8,7")]
    [InlineData("3.1,1.2,1.2,8,0.5,2", "10,20,30,5,5,1")]
    [InlineData("1,2,3,4", "4,3,2,1")]
    public void SpearmanMatchesScipy(string a, string b)
    {
        static double[] Parse(string s) => s.Split(',').Select(v => double.Parse(v, CultureInfo.InvariantCulture)).ToArray();
        double ours = Uncertainty.Spearman(Parse(a), Parse(b));
        // Reference: scipy.stats.spearmanr (Debian python3-scipy).
        var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, [NiftiPython.Tool("spearman.py"), a, b]);
        Assert.True(exit == 0, $"python3-scipy is needed (apt-get install -y python3-scipy): {stderr}");
        Assert.Equal(double.Parse(stdout.Trim(), CultureInfo.InvariantCulture), ours, 12);
    }

    /// <summary>
    /// The estimate against the true error on the committed demo phantom (a full build, minutes on two cores:
    /// STACKBUILD_SOAK=1). Prints the rank correlations that docs/uncertainty.md reports; asserts only that the
    /// estimate ranks the worst sections (the torn one) high, the property the report relies on.
    /// </summary>
    [SoakFact]
    public void EstimateAgainstTheDemoTruth()
    {
        var folder = RepositoryPaths.DemoSeries;
        var truth = SeriesTruth.Read(Path.Combine(folder, "truth.json"));
        var record = Uncertainty.Annotate(BuildPipeline.Run(new BuildOptions { Input = folder }).Record);
        var evaluation = TruthEvaluation.Evaluate(record, truth);
        var estimates = Uncertainty.Estimate(record);
        var rows = evaluation.Sections.Where(s => estimates.ContainsKey(s.Number)).ToList();
        double[] estimated = rows.Select(s => estimates[s.Number].AccumulatedUm).ToArray();
        double[] link = rows.Select(s => estimates[s.Number].LinkUm).ToArray();

        // True error relative to the reference section (what the random walk models): the distance, at the truth
        // plane's sample points, between where this section's map and the reference's map put them.
        var maps = record.Sections.Where(s => s.Matrix is not null && truth.Sections.ContainsKey(s.Number))
            .ToDictionary(s => s.Number, s => truth.Sections[s.Number].PlaneToImage.Then(Transform2D.FromRows(s.Matrix!)));
        var reference = maps[record.ReferenceSection];
        double um = record.VoxelSizeMm[0] * 1000;
        double RelativeUm(int number)
        {
            double sum = 0;
            int n = 0;
            for (int a = 0; a < 5; a++)
            for (int b = 0; b < 5; b++)
            {
                double x = truth.PlaneWidth * (0.1 + 0.2 * a), y = truth.PlaneHeight * (0.1 + 0.2 * b);
                var p = maps[number].Apply(x, y);
                var q = reference.Apply(x, y);
                sum += Math.Sqrt((p.X - q.X) * (p.X - q.X) + (p.Y - q.Y) * (p.Y - q.Y));
                n++;
            }
            return sum / n * um;
        }
        double[] globalError = rows.Select(s => s.ErrorUm).ToArray();
        double[] relative = rows.Select(s => RelativeUm(s.Number)).ToArray();
        var pairRows = rows.Where(s => s.PairErrorPx is not null).ToList();
        double rhoGlobal = Uncertainty.Spearman(estimated, globalError);
        double rhoRelative = Uncertainty.Spearman(estimated, relative);
        double rhoPair = Uncertainty.Spearman(pairRows.Select(s => estimates[s.Number].LinkUm).ToArray(), pairRows.Select(s => s.PairErrorPx!.Value * um).ToArray());
        output.WriteLine($"sections {rows.Count}; Spearman(estimate, error after global fit) = {rhoGlobal:0.000}; " +
            $"Spearman(estimate, error relative to reference section {record.ReferenceSection}) = {rhoRelative:0.000}; " +
            $"Spearman(link estimate, true pairwise error) = {rhoPair:0.000}");
        foreach (var (s, i) in rows.Select((s, i) => (s, i)))
            output.WriteLine($"{s.Number,3} est {estimated[i],8:0.0} link {link[i],7:0.0} | true global {globalError[i],8:0.0} relative {relative[i],8:0.0} pair {(s.PairErrorPx ?? 0) * um,7:0.0} µm");

        // The section with the largest link estimate is among the three with the largest true pairwise error.
        var worstEstimated = rows[Array.IndexOf(link, link.Max())].Number;
        var worstTrue = pairRows.OrderByDescending(s => s.PairErrorPx).Take(3).Select(s => s.Number).ToList();
        Assert.Contains(worstEstimated, worstTrue);
    }
}
