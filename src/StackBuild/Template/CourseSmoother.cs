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
    /// Variance of one measurement, told apart from the walk's own steps: consecutive measurements (no fresh start between)
    /// differ by the steps between them plus two measurement errors, so the measurement variance is half of what the
    /// differences' robust variance (1.4826 × median absolute deviation, squared) exceeds the typical summed step variance
    /// by; at least <paramref name="floor"/>². (The spread about a window-smoothed course, used before, counted the walk's
    /// section-to-section steps as measurement noise, so the course followed the template less than the links deserved:
    /// template rows of docs/accuracy.md's development table, median error 0.12–0.31 px against 0.16–0.39 px.)
    /// </summary>
    public static double NoiseVarianceFromSteps(IReadOnlyList<double> values, IReadOnlyList<double> weights, IReadOnlyList<double> stepSd, double minStepSd, double floor)
    {
        var differences = new List<double>();
        var stepVariances = new List<double>();
        int previous = -1;
        double summed = 0;
        for (int i = 0; i < values.Count; i++)
        {
            double sd = Math.Max(minStepSd, stepSd[i]);
            if (i == 0 || double.IsPositiveInfinity(sd)) { previous = -1; summed = 0; }
            else summed += sd * sd;
            if (weights[i] <= 0) continue;
            if (previous >= 0) { differences.Add(values[i] - values[previous]); stepVariances.Add(summed); }
            previous = i;
            summed = 0;
        }
        if (differences.Count < 3) return floor * floor;
        double centre = Numerics.Quantiles.Median(differences);
        double spread = Numerics.Quantiles.RobustSigma(differences.Select(d => Math.Abs(d - centre)));
        double variance = (spread * spread - Numerics.Quantiles.Median(stepVariances)) / 2;
        return Math.Max(floor * floor, variance);
    }
}
