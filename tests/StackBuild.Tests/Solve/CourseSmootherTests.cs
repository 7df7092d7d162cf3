using StackBuild.Template;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The course smoother's measurement-noise estimate on simulated random walks whose step and noise spreads are known
/// (a Gaussian random walk seen through Gaussian noise: the textbook local-level model; common practice).
/// </summary>
public sealed class CourseSmootherTests
{
    private static (double[] Values, double[] Steps) Walk(int n, double stepSd, double noiseSd, int seed)
    {
        var random = new Random(seed);
        double Gauss() => Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
        var values = new double[n];
        double level = 0;
        for (int i = 0; i < n; i++)
        {
            if (i > 0) level += stepSd * Gauss();
            values[i] = level + noiseSd * Gauss();
        }
        return (values, Enumerable.Repeat(stepSd, n).ToArray());
    }

    [Theory]
    [InlineData(0.3, 1.0)]  // noisy matches on tight links
    [InlineData(1.0, 0.5)]  // loose links, good matches: a spread about a smooth course would count the steps as noise
    [InlineData(0.5, 0.5)]
    public void TheNoiseIsToldApartFromTheSteps(double stepSd, double noiseSd)
    {
        var estimates = Enumerable.Range(0, 20).Select(seed =>
        {
            var (values, steps) = Walk(400, stepSd, noiseSd, seed);
            return Math.Sqrt(CourseSmoother.NoiseVarianceFromSteps(values, Enumerable.Repeat(1.0, 400).ToArray(), steps, 0.01, 0.01));
        }).OrderBy(v => v).ToList();
        double median = estimates[estimates.Count / 2];
        Assert.InRange(median, 0.8 * noiseSd, 1.2 * noiseSd);
    }

    [Fact]
    public void PerfectMatchesGiveTheFloorAndAFreshStartIsNotADifference()
    {
        // Measurements exactly on a walk: no noise beyond the floor. A jump of 100 across a fresh start (step ∞) is not
        // compared across.
        var (values, steps) = Walk(60, 0.5, 0, 3);
        for (int i = 30; i < 60; i++) values[i] += 100;
        steps[30] = double.PositiveInfinity;
        double variance = CourseSmoother.NoiseVarianceFromSteps(values, Enumerable.Repeat(1.0, 60).ToArray(), steps, 0.01, 0.1);
        Assert.True(variance <= 0.1 * 0.1 + 0.05, $"variance {variance}");
    }
}
