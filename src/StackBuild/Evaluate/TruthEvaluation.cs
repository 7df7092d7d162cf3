using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.IO;
using StackBuild.Pipeline;
using StackBuild.Numerics;

namespace StackBuild.Evaluate;

/// <summary>Where every section truly lies: truth-plane pixels → scanned image pixels, per section number.</summary>
/// <param name="PlaneWidth">Width of a truth plane in pixels (the points compared are spread over it).</param>
/// <param name="PixelSizeUm">Size of a truth-plane pixel in µm.</param>
public sealed record SeriesTruth(int PlaneWidth, int PlaneHeight, double PixelSizeUm, IReadOnlyDictionary<int, TruthSection> Sections)
{
    /// <summary>
    /// Reads a truth file in StackBuild's truth format (what <c>stackbuild demo</c> writes as truth.json):
    /// <c>options.width</c>, <c>options.height</c>, <c>options.pixel_size_um</c>, and <c>sections[]</c> with
    /// <c>number</c>, <c>mirrored</c> and <c>plane_to_image</c> (3×3 rows; truth-plane pixel → image pixel).
    /// </summary>
    public static SeriesTruth Read(string path)
    {
        try
        {
            using var doc = JsonDocument.Parse(File.ReadAllText(path));
            var root = doc.RootElement;
            var options = root.GetProperty("options");
            var sections = new Dictionary<int, TruthSection>();
            foreach (var s in root.GetProperty("sections").EnumerateArray())
            {
                if (s.TryGetProperty("lost", out var lost) && lost.GetBoolean()) continue;
                var rows = s.GetProperty("plane_to_image").EnumerateArray().Select(r => r.EnumerateArray().Select(v => v.GetDouble()).ToArray()).ToArray();
                sections[s.GetProperty("number").GetInt32()] = new TruthSection(Transform2D.FromRows(rows), s.GetProperty("mirrored").GetBoolean());
            }
            return new SeriesTruth(options.GetProperty("width").GetInt32(), options.GetProperty("height").GetInt32(),
                options.GetProperty("pixel_size_um").GetDouble(), sections);
        }
        catch (Exception e) when (e is JsonException or KeyNotFoundException or InvalidOperationException or FormatException or ArgumentException)
        {
            throw new InputProblemException(path, $"not a readable truth file ({e.Message})",
                "give the truth.json written by 'stackbuild demo', or a file in the same format (see README)");
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new InputProblemException(path, "the truth file cannot be read", "check the path and permissions");
        }
    }
}

public sealed record TruthSection(Transform2D PlaneToImage, bool Mirrored);

/// <summary>One section's error against the truth.</summary>
/// <param name="ErrorPx">Mean distance (output voxels) over points spread across the truth plane between where the build put them and where the global fit says they belong.</param>
/// <param name="RotationErrorDegrees">Rotation of the section relative to the global fit.</param>
/// <param name="MirrorWrong">True when the section's handedness differs from the global fit's.</param>
/// <param name="PairErrorPx">Mean point distance relative to the previous evaluated section (the pairwise error), or null for the first.</param>
public sealed record SectionError(int Number, double ErrorPx, double ErrorUm, double RotationErrorDegrees, bool MirrorWrong,
    double? PairErrorPx, double? PairRotationDegrees, double DriftPx, double? Confidence);

public sealed record Summary(double Median, double P95, double Max);

/// <param name="Common">The one map truth-plane pixels → output (i, j) fitted over the sections; each section's error is measured against it.</param>
public sealed record EvaluationResult(
    IReadOnlyList<SectionError> Sections,
    Summary ErrorPx, Summary ErrorUm, Summary RotationDegrees, Summary PairErrorPx, Summary PairRotationDegrees,
    int MirrorWrong, double DriftMaxPx, double DriftRmsPx, double OutputPixelUm, int Evaluated, int Missing,
    Transform2D Common = default);

/// <summary>
/// Compares a build's sidecar with the truth: each placed section's map truth-plane → output plane should be
/// one and the same map for every section. That common map is fitted by least squares over all sections of the
/// majority's handedness (a similarity transform with reflection allowed, Umeyama 1991, IEEE TPAMI 13:376), refitted
/// once without the grossly misplaced ones (<see cref="GrossFactor"/>), and each section's
/// error is measured against it. Low-frequency drift is the moving average (over
/// <see cref="DriftWindow"/> sections) of the per-section residual displacement.
/// </summary>
public static class TruthEvaluation
{
    public const int DriftWindow = 9;

    /// <summary>The global fit is refitted without sections further off than GrossFactor × the median error + GrossFloorPx.</summary>
    public const double GrossFactor = 3, GrossFloorPx = 2;

    public static EvaluationResult Evaluate(BuildRecord build, SeriesTruth truth)
    {
        var placed = build.Sections
            .Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed && s.Matrix is not null && truth.Sections.ContainsKey(s.Number))
            .OrderBy(s => s.Number)
            .Select(s => (Record: s, Map: truth.Sections[s.Number].PlaneToImage.Then(Transform2D.FromRows(s.Matrix!))))
            .ToList();
        int missing = build.Sections.Count(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed && !truth.Sections.ContainsKey(s.Number));
        if (placed.Count == 0)
            throw new InputProblemException(null, "no placed section of the build has a truth entry", "check that the sidecar and the truth file describe the same series");

        var points = SamplePoints(truth.PlaneWidth, truth.PlaneHeight);
        // Handedness of the common map: the majority's.
        bool majorityMirrored = placed.Count(p => p.Map.IsMirrored) * 2 > placed.Count;
        Transform2D Fit(IEnumerable<Transform2D> maps)
        {
            var src = new List<(double X, double Y)>();
            var dst = new List<(double X, double Y)>();
            foreach (var map in maps)
                foreach (var p in points) { src.Add(p); dst.Add(map.Apply(p.X, p.Y)); }
            return FitSimilarity(src, dst, majorityMirrored);
        }
        var sameHand = placed.Where(p => p.Map.IsMirrored == majorityMirrored).Select(p => p.Map).ToList();
        var common = Fit(sameHand);
        // Refitted once without the grossly misplaced sections (more than GrossFactor × the median error + GrossFloorPx
        // off): least squares would otherwise let a few sections a hundred pixels off shift every other section's error.
        var first = sameHand.Select(m => MeanDistance(points, m, common)).ToList();
        double gross = GrossFactor * Quantiles.OfSorted([.. first.Order()], 0.5) + GrossFloorPx;
        var kept = sameHand.Where((_, i) => first[i] <= gross).ToList();
        if (kept.Count >= 2 && kept.Count < sameHand.Count) common = Fit(kept);
        double outUm = build.VoxelSizeMm.Length > 0 ? build.VoxelSizeMm[0] * 1000 : truth.PixelSizeUm;

        var residuals = placed.Select(p =>
        {
            var c = (X: (truth.PlaneWidth - 1) / 2.0, Y: (truth.PlaneHeight - 1) / 2.0);
            var a = p.Map.Apply(c.X, c.Y);
            var b = common.Apply(c.X, c.Y);
            return (a.X - b.X, a.Y - b.Y);
        }).ToArray();
        var drift = MovingAverage(residuals, DriftWindow);

        var errors = new List<SectionError>();
        for (int n = 0; n < placed.Count; n++)
        {
            var (record, map) = placed[n];
            double err = MeanDistance(points, map, common);
            double rot = Angles.Wrap(map.RotationDegrees - common.RotationDegrees);
            double? pairErr = null, pairRot = null;
            if (n > 0)
            {
                var prev = placed[n - 1].Map;
                pairErr = MeanDistance(points, map, prev);
                pairRot = map.IsMirrored == prev.IsMirrored ? Math.Abs(Angles.Wrap(map.RotationDegrees - prev.RotationDegrees)) : 180;
            }
            errors.Add(new SectionError(record.Number, err, err * outUm, Math.Abs(rot), map.IsMirrored != common.IsMirrored,
                pairErr, pairRot, Math.Sqrt(drift[n].X * drift[n].X + drift[n].Y * drift[n].Y), record.Confidence));
        }
        var good = errors.Where(e => !e.MirrorWrong).ToList();
        var pairs = errors.Where(e => e.PairErrorPx is not null).ToList();
        return new EvaluationResult(errors,
            Summarise(good.Select(e => e.ErrorPx)), Summarise(good.Select(e => e.ErrorUm)), Summarise(good.Select(e => e.RotationErrorDegrees)),
            Summarise(pairs.Select(e => e.PairErrorPx!.Value)), Summarise(pairs.Select(e => e.PairRotationDegrees!.Value)),
            errors.Count(e => e.MirrorWrong), errors.Max(e => e.DriftPx), Math.Sqrt(errors.Average(e => e.DriftPx * e.DriftPx)),
            outUm, errors.Count, missing, common);
    }

    /// <summary>A 5 × 5 grid over the middle 80 % of the plane (where tissue lies).</summary>
    private static List<(double X, double Y)> SamplePoints(int width, int height)
    {
        var list = new List<(double, double)>();
        for (int a = 0; a < 5; a++)
        for (int b = 0; b < 5; b++)
            list.Add((width * (0.1 + 0.2 * a), height * (0.1 + 0.2 * b)));
        return list;
    }

    private static double MeanDistance(List<(double X, double Y)> points, Transform2D a, Transform2D b) =>
        points.Average(p =>
        {
            var u = a.Apply(p.X, p.Y);
            var v = b.Apply(p.X, p.Y);
            return Math.Sqrt((u.X - v.X) * (u.X - v.X) + (u.Y - v.Y) * (u.Y - v.Y));
        });

    private static (double X, double Y)[] MovingAverage((double X, double Y)[] values, int window)
    {
        var result = new (double X, double Y)[values.Length];
        int half = window / 2;
        for (int i = 0; i < values.Length; i++)
        {
            int lo = Math.Max(0, i - half), hi = Math.Min(values.Length - 1, i + half);
            double sx = 0, sy = 0;
            for (int j = lo; j <= hi; j++) { sx += values[j].X; sy += values[j].Y; }
            result[i] = (sx / (hi - lo + 1), sy / (hi - lo + 1));
        }
        return result;
    }

    /// <summary>Least-squares similarity transform dst ≈ s·R·src + t (<see cref="PointFit.Fit"/>, Umeyama 1991).</summary>
    public static Transform2D FitSimilarity(IReadOnlyList<(double X, double Y)> src, IReadOnlyList<(double X, double Y)> dst, bool mirrored) =>
        PointFit.Fit(src, dst, mirrored, withScale: true);

    private static Summary Summarise(IEnumerable<double> values)
    {
        var v = values.OrderBy(x => x).ToArray();
        if (v.Length == 0) return new Summary(double.NaN, double.NaN, double.NaN);
        return new Summary(Quantiles.OfSorted(v, 0.5), Quantiles.OfSorted(v, 0.95), v[^1]);
    }
}
