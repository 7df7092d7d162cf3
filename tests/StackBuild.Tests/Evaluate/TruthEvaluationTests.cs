using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Pipeline;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The truth comparison on sidecars made here with known errors (analytic truths).</summary>
public class TruthEvaluationTests
{
    private const int W = 200, H = 160;

    private static (BuildRecord Build, SeriesTruth Truth) Series(int count, Func<int, Transform2D> extraError, Func<int, bool>? wrongMirror = null)
    {
        var rng = new Random(11);
        var truth = new Dictionary<int, TruthSection>();
        var records = new List<SectionRecord>();
        var global = Transform2D.Rigid(23, 40, -7);
        for (int n = 1; n <= count; n++)
        {
            bool mirrored = n % 7 == 0;
            var planeToImage = Transform2D.Rigid(rng.NextDouble() * 360, rng.NextDouble() * 30, rng.NextDouble() * 30, mirrored);
            truth[n] = new TruthSection(planeToImage, mirrored);
            // A perfect build maps image → plane as planeToImage⁻¹ followed by one global map.
            var imageToPlane = planeToImage.Inverse().Then(global).Then(extraError(n));
            if (wrongMirror?.Invoke(n) == true) imageToPlane = Transform2D.MirrorX(100).Then(imageToPlane);
            records.Add(new SectionRecord { Number = n, Status = SectionOutcome.Aligned, Matrix = imageToPlane.ToRows(), Confidence = 1 });
        }
        var build = new BuildRecord { VoxelSizeMm = [0.01, 0.01, 0.05], Sections = records };
        return (build, new SeriesTruth(W, H, 10, truth));
    }

    [Fact]
    public void PerfectBuildHasNoError()
    {
        var (build, truth) = Series(30, _ => Transform2D.Identity);
        var r = TruthEvaluation.Evaluate(build, truth);
        Assert.Equal(30, r.Evaluated);
        Assert.True(r.ErrorPx.Max < 1e-9, $"max error {r.ErrorPx.Max}");
        Assert.True(r.PairErrorPx.Max < 1e-9);
        Assert.Equal(0, r.MirrorWrong);
        Assert.True(r.DriftMaxPx < 1e-9);
    }

    [Fact]
    public void OneShiftedSectionShowsItsShift()
    {
        // Section 15 is 3,4 px off (5 px): its pairwise error against 14 is exactly 5 px, and the global fit,
        // made over 40 sections, moves by 1/40 of that.
        var (build, truth) = Series(40, n => n == 15 ? Transform2D.Translation(3, 4) : Transform2D.Identity);
        var r = TruthEvaluation.Evaluate(build, truth);
        var s15 = r.Sections.Single(s => s.Number == 15);
        Assert.Equal(5.0, s15.PairErrorPx!.Value, 6);
        Assert.InRange(s15.ErrorPx, 5 - 0.2, 5 + 0.2);
        Assert.InRange(s15.ErrorUm, 48, 52); // 10 µm voxels
        Assert.True(r.ErrorPx.Median < 0.2);
    }

    [Fact]
    public void SteadyDriftIsMeasured()
    {
        // A slow drift of 0.2 px per section along x: after the global fit the ends are ±3.9 px off.
        var (build, truth) = Series(40, n => Transform2D.Translation(0.2 * n, 0));
        var r = TruthEvaluation.Evaluate(build, truth);
        Assert.InRange(r.DriftMaxPx, 3.0, 4.0);
        Assert.True(r.PairErrorPx.Median is > 0.19 and < 0.21);
    }

    [Fact]
    public void WrongMirrorIsCounted()
    {
        var (build, truth) = Series(20, _ => Transform2D.Identity, n => n is 5 or 12);
        var r = TruthEvaluation.Evaluate(build, truth);
        Assert.Equal(2, r.MirrorWrong);
        Assert.Equal([5, 12], r.Sections.Where(s => s.MirrorWrong).Select(s => s.Number));
    }

    [Fact]
    public void FitSimilarityRecoversAKnownMap()
    {
        var truthMap = Transform2D.MirrorX().Then(Transform2D.Rotation(-61)).Then(Transform2D.Scale(0.5)).Then(Transform2D.Translation(7, -3));
        var src = Enumerable.Range(0, 20).Select(i => ((double)(i * 7 % 13), (double)(i * 5 % 11))).ToList();
        var dst = src.Select(p => truthMap.Apply(p.Item1, p.Item2)).ToList();
        var fit = TruthEvaluation.FitSimilarity(src, dst, mirrored: true);
        Assert.True(fit.ApproximatelyEquals(truthMap, 1e-9));
    }
}
