using System.Runtime.CompilerServices;
using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Template;

/// <summary>Mutual information of two images over their overlap, in nats, with the entropies it is made of.</summary>
/// <param name="MutualInformation">I(A;B) = H(A) + H(B) − H(A,B) (Viola &amp; Wells 1997, Int. J. Comput. Vis. 24:137).</param>
/// <param name="Normalised">(H(A) + H(B)) / H(A,B), in [1, 2] (Studholme, Hill &amp; Hawkes 1999, Pattern Recognit. 32:71); 1 when there is no overlap.</param>
/// <param name="Samples">Section pixels that fell inside the slice.</param>
public readonly record struct MutualInformationValue(double MutualInformation, double Normalised, double SectionEntropy, double SliceEntropy,
    double JointEntropy, int Samples);

/// <summary>
/// Histogram estimate of the mutual information between a section and a template slice: the section's grey levels
/// are binned (hard), the slice is sampled bilinearly where each section pixel lands and its grey level is shared
/// between the two nearest bins (a first-order Parzen window, a simpler kernel than the cubic B-spline of Mattes et al.
/// 2003, IEEE Trans. Med. Imaging 22:120), so the measure changes smoothly with the placement.
/// Mutual information does not care whether tissue is darker or brighter than the background, only that grey levels
/// of one image predict those of the other.
/// </summary>
public static class HistogramMutualInformation
{
    /// <summary>
    /// The measure for section pixels (every <paramref name="stride"/>-th in x and y) mapped by
    /// <paramref name="sectionToSlice"/>; section grey levels are binned over <paramref name="sectionRange"/>
    /// (bin = ⌊(v − low)/(high − low)·bins⌋, clamped), slice grey levels over <paramref name="sliceRange"/>
    /// (u = clamp((v − low)/(high − low), 0, 1)·(bins − 1), shared between bins ⌊u⌋ and ⌊u⌋ + 1).
    /// Pixels landing outside the slice are left out (the overlap only).
    /// </summary>
    public static MutualInformationValue Measure(GrayImage section, GrayImage slice, Transform2D sectionToSlice, int bins,
        (double Low, double High) sectionRange, (double Low, double High) sliceRange, int stride = 1)
    {
        if (bins < 2 || bins > 256) throw new ArgumentOutOfRangeException(nameof(bins), "Between 2 and 256 bins.");
        var a = QuantiseHard(section, bins, sectionRange);
        var b = ScaleSoft(slice, bins, sliceRange);
        var joint = new double[bins * bins];
        int n = Accumulate(a, section.Width, section.Height, b, slice.Width, slice.Height, sectionToSlice, bins, joint, stride);
        return FromJoint(joint, bins, n);
    }

    /// <summary>The grey levels at fractions <paramref name="lowFraction"/> and 1 − it of the sorted pixels (a robust range).</summary>
    public static (double Low, double High) RobustRange(GrayImage image, double lowFraction = 0.005)
    {
        var pixels = image.Pixels;
        int step = Math.Max(1, pixels.Length / 16384);
        var sample = new float[(pixels.Length + step - 1) / step];
        for (int i = 0, j = 0; i < pixels.Length; i += step, j++) sample[j] = pixels[i];
        Array.Sort(sample);
        double low = sample[(int)(lowFraction * (sample.Length - 1))], high = sample[(int)((1 - lowFraction) * (sample.Length - 1))];
        if (!(high > low)) { low = sample[0]; high = sample[^1]; }
        if (!(high > low)) high = low + 1;
        return (low, high);
    }

    internal static byte[] QuantiseHard(GrayImage image, int bins, (double Low, double High) range)
    {
        var result = new byte[image.Pixels.Length];
        double scale = bins / (range.High - range.Low);
        for (int i = 0; i < result.Length; i++)
        {
            double v = (image.Pixels[i] - range.Low) * scale;
            result[i] = (byte)(v <= 0 || double.IsNaN(v) ? 0 : v >= bins - 1 ? bins - 1 : (int)v);
        }
        return result;
    }

    internal static GrayImage ScaleSoft(GrayImage image, int bins, (double Low, double High) range)
    {
        var result = new GrayImage(image.Width, image.Height);
        double scale = 1.0 / (range.High - range.Low);
        for (int i = 0; i < result.Pixels.Length; i++)
        {
            double v = (image.Pixels[i] - range.Low) * scale;
            result.Pixels[i] = (float)((double.IsNaN(v) ? 0 : Math.Clamp(v, 0, 1)) * (bins - 1));
        }
        return result;
    }

    /// <summary>Adds the section–slice pairs to <paramref name="joint"/> (section bin major); returns the samples used.</summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    internal static int Accumulate(byte[] sectionBins, int width, int height, GrayImage scaledSlice, int sliceWidth, int sliceHeight,
        Transform2D sectionToSlice, int bins, double[] joint, int stride)
    {
        var s = scaledSlice.Pixels;
        int count = 0;
        for (int y = 0; y < height; y += stride)
        {
            var (sx, sy) = sectionToSlice.Apply(0, y);
            double dx = sectionToSlice.M00 * stride, dy = sectionToSlice.M10 * stride;
            int rowStart = y * width;
            for (int x = 0; x < width; x += stride, sx += dx, sy += dy)
            {
                if (sx < -0.5 || sy < -0.5 || sx > sliceWidth - 0.5 || sy > sliceHeight - 0.5) continue;
                double u = Bilinear.SampleInside(s, sliceWidth, sliceHeight, sx, sy); // within half a pixel of the edge: tested above
                int b0 = (int)u;
                if (b0 >= bins - 1) b0 = bins - 1;
                double f = u - b0;
                int cell = sectionBins[rowStart + x] * bins + b0;
                joint[cell] += 1 - f;
                if (f > 0) joint[cell + 1] += f;
                count++;
            }
        }
        return count;
    }

    internal static MutualInformationValue FromJoint(double[] joint, int bins, int samples)
    {
        if (samples == 0) return new MutualInformationValue(0, 1, 0, 0, 0, 0);
        Span<double> pa = stackalloc double[bins];
        Span<double> pb = stackalloc double[bins];
        double total = 0;
        for (int i = 0; i < bins; i++)
        for (int j = 0; j < bins; j++)
        {
            double v = joint[i * bins + j];
            pa[i] += v; pb[j] += v; total += v;
        }
        double inv = 1.0 / total, hab = 0, ha = 0, hb = 0;
        for (int i = 0; i < joint.Length; i++) if (joint[i] > 0) { double p = joint[i] * inv; hab -= p * Math.Log(p); }
        for (int i = 0; i < bins; i++)
        {
            if (pa[i] > 0) { double p = pa[i] * inv; ha -= p * Math.Log(p); }
            if (pb[i] > 0) { double p = pb[i] * inv; hb -= p * Math.Log(p); }
        }
        double nmi = hab > 0 ? (ha + hb) / hab : 1;
        return new MutualInformationValue(ha + hb - hab, nmi, ha, hb, hab, samples);
    }
}
