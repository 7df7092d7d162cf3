using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Pipeline;

namespace StackBuild.Tests;

/// <summary>
/// Is a chain's drift made of slow link errors (neighbouring links erring alike, as real change of tissue shape between
/// sections makes every registration over a stretch err) or of independent ones (noise, which more pairs could average
/// out)? Against the truth, each neighbour link of a build has an error map Dᵢ (truth plane → truth plane, the identity
/// when the two sections are placed right relative to each other), written as (rotation about the plane centre, shift).
/// A permutation surrogate answers it: the same link errors re-chained in shuffled order keep their sizes and lose their
/// order; if the real order drifts much more than the shuffled ones, the drift comes from the errors being slow. The same
/// with the mean link error taken out first gives the drift of independent, unbiased errors of the same spread (what
/// registration noise alone would make); a mean link error is a bias every link shares.
/// </summary>
public static class DriftSurrogate
{
    /// <param name="ShuffledDriftRmsPx">Mean drift rms of the link errors re-chained in shuffled orders (their mean kept).</param>
    /// <param name="NoiseDriftRmsPx">Mean drift rms of the link errors minus their mean, shuffled: independent, unbiased errors of the same spread.</param>
    /// <param name="MeanLink">Mean link error: degrees, shift x, shift y (truth-plane pixels about the plane centre).</param>
    public sealed record Result(EvaluationResult Chain, double ShuffledDriftRmsPx, double ShuffledDriftP95Px,
        double NoiseDriftRmsPx, double NoiseDriftP95Px, double LinkLag1Autocorrelation, double[] MeanLink);

    public static Result Measure(BuildRecord build, SeriesTruth truth)
    {
        var placed = build.Sections
            .Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed && s.Matrix is not null && truth.Sections.ContainsKey(s.Number))
            .OrderBy(s => s.Number).ToList();
        var maps = placed.Select(s => truth.Sections[s.Number].PlaneToImage.Then(Transform2D.FromRows(s.Matrix!))).ToList();
        bool majority = maps.Count(m => m.IsMirrored) * 2 > maps.Count;
        var good = Enumerable.Range(0, placed.Count).Where(i => maps[i].IsMirrored == majority).ToList();
        (double X, double Y) c = ((truth.PlaneWidth - 1) / 2.0, (truth.PlaneHeight - 1) / 2.0);

        // Link errors between consecutive sections of the majority's handedness, as (degrees, tx, ty) about the plane centre.
        var links = new List<double[]>();
        for (int k = 1; k < good.Count; k++)
        {
            var d = maps[good[k]].Then(maps[good[k - 1]].Inverse());
            var moved = d.Apply(c.X, c.Y);
            links.Add([d.RotationDegrees, moved.X - c.X, moved.Y - c.Y]);
        }
        BuildRecord Rechain(List<double[]> parts)
        {
            var newMaps = maps.ToArray();
            for (int k = 1; k < good.Count; k++)
            {
                var d = Transform2D.Rotation(parts[k - 1][0], c.X, c.Y).Then(Transform2D.Translation(parts[k - 1][1], parts[k - 1][2]));
                newMaps[good[k]] = d.Then(newMaps[good[k - 1]]);
            }
            var sections = build.Sections.Select(s =>
            {
                int i = placed.FindIndex(p => p.Number == s.Number);
                if (i < 0 || !good.Contains(i)) return s;
                var matrix = truth.Sections[s.Number].PlaneToImage.Inverse().Then(newMaps[i]);
                return s with { Matrix = matrix.ToRows() };
            }).ToList();
            return build with { Sections = sections };
        }

        double lag1 = Enumerable.Range(1, 2).Average(axis =>
        {
            var v = links.Select(l => l[axis]).ToArray();
            double mean = v.Average(), var0 = v.Sum(x => (x - mean) * (x - mean));
            double cov = 0;
            for (int k = 1; k < v.Length; k++) cov += (v[k] - mean) * (v[k - 1] - mean);
            return cov / var0;
        });
        var rng = new Random(20261202);
        var mean = Enumerable.Range(0, 3).Select(a => links.Average(l => l[a])).ToArray();
        var centred = links.Select(l => new[] { l[0] - mean[0], l[1] - mean[1], l[2] - mean[2] }).ToList();
        double[] Shuffled(List<double[]> values) => Enumerable.Range(0, Shuffles)
            .Select(_ => TruthEvaluation.Evaluate(Rechain(values.OrderBy(_ => rng.Next()).ToList()), truth).DriftRmsPx).Order().ToArray();
        var kept = Shuffled(links);
        var noise = Shuffled(centred);
        return new Result(TruthEvaluation.Evaluate(build, truth), kept.Average(), Numerics.Quantiles.OfSorted(kept, 0.95),
            noise.Average(), Numerics.Quantiles.OfSorted(noise, 0.95), lag1, mean);
    }

    public const int Shuffles = 200;
}
