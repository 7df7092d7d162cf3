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
    /// Percentiles of the finite values, located in a 65 536-bin histogram between the minimum and maximum and
    /// interpolated within the bin (accurate to one bin width, 1/65 536 of the range; two passes, no sorting).
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
        const int bins = 1 << 16;
        var histogram = new long[bins];
        double scale = bins / ((double)max - min);
        foreach (float v in values)
        {
            if (!float.IsFinite(v)) continue;
            histogram[Math.Min((int)((v - (double)min) * scale), bins - 1)]++;
        }
        double low = Locate(histogram, count, lowPercent, min, max);
        double high = Locate(histogram, count, highPercent, min, max);
        if (!(high > low)) high = low + ((double)max - min) / bins;
        return new IntensityWindow(low, high);
    }

    private static double Locate(long[] histogram, long count, double percent, double min, double max)
    {
        // Rank of the wanted value among the sorted values, counted from 0 (the "linear" percentile definition).
        double rank = Math.Clamp(percent, 0, 100) / 100.0 * (count - 1);
        double width = (max - min) / histogram.Length;
        long below = 0;
        for (int b = 0; b < histogram.Length; b++)
        {
            long inBin = histogram[b];
            if (inBin > 0 && below + inBin > rank)
                return min + width * (b + (rank - below + 0.5) / inBin);
            below += inBin;
        }
        return max;
    }
}
