using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Reslice;

/// <summary>
/// The intensity range shown from black (<see cref="Low"/>) to white (<see cref="High"/>); values beyond are
/// clipped. (Common practice in image display: a linear window.)
/// </summary>
public readonly record struct IntensityWindow(double Low, double High)
{
    public const double DefaultLowPercentile = 0.5, DefaultHighPercentile = 99.5;

    /// <summary>Parses "LOW,HIGH" (invariant culture); raises <see cref="InputProblemException"/> when it is not that.</summary>
    public static IntensityWindow Parse(string text, string? source = null)
    {
        var parts = text.Split(',');
        if (parts.Length == 2
            && double.TryParse(parts[0].Trim(), System.Globalization.NumberStyles.Float, System.Globalization.CultureInfo.InvariantCulture, out var low)
            && double.TryParse(parts[1].Trim(), System.Globalization.NumberStyles.Float, System.Globalization.CultureInfo.InvariantCulture, out var high))
            return Checked(low, high, source);
        throw new InputProblemException(source, $"the window '{PlaneOrientation.Shorten(text)}' is not two numbers LOW,HIGH",
            "give it as for example --window 10,240");
    }

    /// <summary>A window from <paramref name="low"/> to <paramref name="high"/>, refusing non-numbers and an empty range.</summary>
    public static IntensityWindow Checked(double low, double high, string? source = null)
    {
        if (!double.IsFinite(low) || !double.IsFinite(high))
            throw new InputProblemException(source, "the window limits must be finite numbers", "give two numbers LOW,HIGH");
        if (!(high > low))
            throw new InputProblemException(source, $"the window's upper limit ({high}) must be above its lower limit ({low})",
                "give LOW,HIGH with LOW < HIGH");
        return new IntensityWindow(low, high);
    }

    /// <summary>
    /// The robust default: the 0.5th to 99.5th percentiles of the volume's finite voxel values, so a few very
    /// bright or dark voxels do not wash out the rest. A constant volume gets a window one unit wide above its value.
    /// </summary>
    public static IntensityWindow Robust(Volume volume) =>
        FromPercentiles(volume.Voxels, DefaultLowPercentile, DefaultHighPercentile);

    /// <summary>
    /// Percentiles of the finite values with numpy's default ("linear") definition: the value at rank
    /// p/100·(n − 1) among the sorted values, interpolated between the two neighbouring ranks. Found without
    /// sorting everything: a 65 536-bin histogram between minimum and maximum tells which bins hold those ranks,
    /// and only those bins' values are sorted (exact, unless one bin holds over a million values that are not all
    /// the same, when the result is interpolated within the bin, accurate to 1/65 536 of the range).
    /// </summary>
    public static IntensityWindow FromPercentiles(ReadOnlySpan<float> values, double lowPercent, double highPercent)
    {
        float min = float.PositiveInfinity, max = float.NegativeInfinity;
        long count = 0;
        foreach (float v in values)
        {
            if (!float.IsFinite(v)) continue;
            if (v < min) min = v;
            if (v > max) max = v;
            count++;
        }
        if (count == 0) return new IntensityWindow(0, 1);
        if (!(max > min)) return new IntensityWindow(min, min + 1.0);
        var histogram = new Histogram(min, max);
        foreach (float v in values) if (float.IsFinite(v)) histogram.Add(v);
        double low = histogram.Percentile(values, count, lowPercent);
        double high = histogram.Percentile(values, count, highPercent);
        if (!(high > low)) high = low + ((double)max - min) / Histogram.Bins;
        return new IntensityWindow(low, high);
    }

    private sealed class Histogram
    {
        public const int Bins = 1 << 16;
        private const int MaxSorted = 1 << 20;
        private readonly float _min;
        private readonly double _scale;
        private readonly long[] _counts = new long[Bins];
        // Smallest and largest value seen in each bin: a bin of one repeated value (a uniform background) is exact
        // without sorting.
        private readonly float[] _low = new float[Bins], _high = new float[Bins];

        public Histogram(float min, float max)
        {
            _min = min;
            _scale = Bins / ((double)max - min);
            Array.Fill(_low, float.PositiveInfinity);
            Array.Fill(_high, float.NegativeInfinity);
        }

        private int BinOf(float v) => Math.Min((int)((v - (double)_min) * _scale), Bins - 1);

        public void Add(float v)
        {
            int b = BinOf(v);
            _counts[b]++;
            if (v < _low[b]) _low[b] = v;
            if (v > _high[b]) _high[b] = v;
        }

        public double Percentile(ReadOnlySpan<float> values, long count, double percent)
        {
            double rank = Math.Clamp(percent, 0, 100) / 100.0 * (count - 1);
            long below = (long)Math.Floor(rank);
            double lower = Ranked(values, below), upper = below + 1 < count ? Ranked(values, below + 1) : lower;
            return lower + (rank - below) * (upper - lower);
        }

        // The value at 0-based rank r among the sorted finite values.
        private double Ranked(ReadOnlySpan<float> values, long r)
        {
            long before = 0;
            int bin = 0;
            while (before + _counts[bin] <= r) before += _counts[bin++];
            if (_low[bin] == _high[bin]) return _low[bin];
            if (_counts[bin] > MaxSorted)
                return _low[bin] + (_high[bin] - (double)_low[bin]) * (r - before + 0.5) / _counts[bin];
            var inBin = new List<float>((int)_counts[bin]);
            foreach (float v in values) if (float.IsFinite(v) && BinOf(v) == bin) inBin.Add(v);
            inBin.Sort();
            return inBin[(int)(r - before)];
        }
    }
}
