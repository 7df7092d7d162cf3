using StackBuild.Numerics;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Linear-interpolation quantiles (numpy's default percentile definition; values worked by hand).</summary>
public class QuantilesTests
{
    [Fact]
    public void MatchesHandWorkedValues()
    {
        Assert.Equal(2.5, Quantiles.Median([4, 1, 3, 2]));
        Assert.Equal(3, Quantiles.Median([5, 1, 3]));
        // 1..20 at q = 0.95: position 0.95 × 19 = 18.05 → 19 + 0.05 × (20 − 19) = 19.05
        Assert.Equal(19.05, Quantiles.Of(Enumerable.Range(1, 20).Select(i => (double)i), 0.95), 12);
        Assert.True(double.IsNaN(Quantiles.Median([])));
    }

    [Fact]
    public void TheUpperMedianScaleTakesTheLargerMiddleValue()
    {
        // Even count: the upper middle value (3), not the mean of 2 and 3; odd count: the middle; none: 0.
        Assert.Equal(Quantiles.MadToSigma * 3, Quantiles.RobustSigmaUpper([4, 1, 3, 2]), 12);
        Assert.Equal(Quantiles.MadToSigma * 3, Quantiles.RobustSigmaUpper([5, 1, 3]), 12);
        Assert.Equal(0, Quantiles.RobustSigmaUpper([]));
        Assert.Equal(Quantiles.MadToSigma * 2.5, Quantiles.RobustSigma([4, 1, 3, 2]), 12);
    }
}
