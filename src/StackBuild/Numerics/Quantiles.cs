namespace StackBuild.Numerics;

/// <summary>Order statistics used by summaries and reports: one definition for the whole project.</summary>
public static class Quantiles
{
    /// <summary>
    /// The <paramref name="q"/>-quantile (0–1) with linear interpolation between order statistics (the
    /// default of numpy's <c>percentile</c>; common practice). NaN for no values.
    /// </summary>
    public static double Of(IEnumerable<double> values, double q)
    {
        var sorted = values.OrderBy(x => x).ToArray();
        return OfSorted(sorted, q);
    }

    /// <summary>As <see cref="Of"/>, for values already in ascending order.</summary>
    public static double OfSorted(IReadOnlyList<double> sorted, double q)
    {
        if (sorted.Count == 0) return double.NaN;
        double pos = Math.Clamp(q, 0, 1) * (sorted.Count - 1);
        int lo = (int)Math.Floor(pos), hi = Math.Min(sorted.Count - 1, lo + 1);
        return sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo);
    }

    /// <summary>The median (the mean of the two middle values for an even count).</summary>
    public static double Median(IEnumerable<double> values) => Of(values, 0.5);

    /// <summary>
    /// Scales a median absolute deviation to the standard deviation of normally distributed values (1.4826 ≈ 1/Φ⁻¹(3/4);
    /// common practice, e.g. Rousseeuw &amp; Croux 1993, J. Am. Stat. Assoc. 88:1273).
    /// </summary>
    public const double MadToSigma = 1.4826;

    /// <summary>Robust standard deviation: <see cref="MadToSigma"/> × the <see cref="Median"/> of deviations that are already absolute. NaN for none.</summary>
    public static double RobustSigma(IEnumerable<double> absoluteDeviations) => MadToSigma * Median(absoluteDeviations);

    /// <summary>
    /// <see cref="MadToSigma"/> × the upper middle of deviations that are already absolute (for an even count the larger of
    /// the two middle values, not their mean; a slightly more cautious scale for outlier cut-offs over few values). 0 for none.
    /// </summary>
    public static double RobustSigmaUpper(IEnumerable<double> absoluteDeviations)
    {
        var sorted = absoluteDeviations.OrderBy(v => v).ToArray();
        return sorted.Length == 0 ? 0 : MadToSigma * sorted[sorted.Length / 2];
    }
}
