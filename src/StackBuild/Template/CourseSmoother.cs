namespace StackBuild.Template;

/// <summary>
/// The course of a correction along the stack from noisy looks at it: a random walk whose step at each section has its own
/// spread (the chain link's error there) seen through measurements of one spread (the template matches' noise). Kalman
/// filtering forward and the Rauch–Tung–Striebel smoother backward give the least-squares course for that model (Kalman
/// 1960, J. Basic Eng. 82:35; Rauch, Tung &amp; Striebel 1965, AIAA J. 3:1445). Where links are tight the course averages
/// many sections; where they are loose (a step of ∞ starts afresh) it follows each section's own measurement.
/// </summary>
public static class CourseSmoother
{
    /// <param name="values">Measured value per section (ignored where the weight is 0).</param>
    /// <param name="weights">Measurement weight (0 = no measurement; w scales the noise variance by 1/w).</param>
    /// <param name="stepSd">Standard deviation of the walk's step from the section before (∞ = no tie to it).</param>
    /// <param name="noiseVariance">Variance of one measurement of weight 1.</param>
    /// <param name="minStepSd">Floor of every step's standard deviation.</param>
    /// <returns>The smoothed course; a run of sections with no measurement at all takes 0.</returns>
    public static double[] Smooth(IReadOnlyList<double> values, IReadOnlyList<double> weights, IReadOnlyList<double> stepSd, double noiseVariance, double minStepSd)
    {
        int n = values.Count;
        var mean = new double[n];
        var variance = new double[n];
        var predictedVariance = new double[n];
        var fresh = new bool[n];
        const double Unknown = 1e12; // the prior of a fresh start: far wider than any correction
        double m = 0, p = Unknown;
        for (int i = 0; i < n; i++)
        {
            double sd = Math.Max(minStepSd, stepSd[i]);
            fresh[i] = i == 0 || double.IsPositiveInfinity(sd);
            if (fresh[i]) { m = 0; p = Unknown; }
            else p += sd * sd;
            predictedVariance[i] = p;
            if (weights[i] > 0)
            {
                double r = noiseVariance / weights[i];
                double k = p / (p + r);
                m += k * (values[i] - m);
                p = (1 - k) * p;
            }
            mean[i] = m;
            variance[i] = p;
        }
        var result = new double[n];
        if (n == 0) return result;
        result[n - 1] = mean[n - 1];
        for (int i = n - 2; i >= 0; i--)
        {
            // Sections before a run's first measurement have variance ~Unknown and gain ~1: they take the run's course.
            double gain = fresh[i + 1] ? 0 : variance[i] / predictedVariance[i + 1];
            result[i] = mean[i] + gain * (result[i + 1] - mean[i]);
        }
        return result;
    }

    /// <summary>
    /// Variance of one measurement: the robust spread (1.4826 × median absolute deviation) of the measurements about a
    /// smooth course through them, squared; at least <paramref name="floor"/>².
    /// </summary>
    public static double NoiseVariance(IReadOnlyList<double> values, IReadOnlyList<double> smooth, IReadOnlyList<double> weights, double floor)
    {
        var residuals = Enumerable.Range(0, values.Count).Where(i => weights[i] > 0).Select(i => Math.Abs(values[i] - smooth[i])).OrderBy(v => v).ToList();
        if (residuals.Count == 0) return floor * floor;
        double mad = residuals[residuals.Count / 2];
        double sd = Math.Max(floor, 1.4826 * mad);
        return sd * sd;
    }
}
