using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Imaging;

/// <summary>Small image operations the registration needs; plain arrays in, plain arrays out.</summary>
internal static class ImageOps
{
    /// <summary>
    /// Area-weighted reduction by the factor <paramref name="scale"/> (≤ 1): each output pixel is the mean of
    /// the input area it covers, so no aliasing from skipped pixels. Output pixel edges sit at input edge
    /// coordinates i/scale, i.e. input pixel x maps to output (x + 0.5)·scale − 0.5.
    /// </summary>
    public static GrayImage Reduce(GrayImage image, double scale, int outWidth, int outHeight)
    {
        var rows = new float[image.Height * outWidth];
        var wx = Weights(image.Width, outWidth, scale);
        for (int y = 0; y < image.Height; y++)
        {
            var src = image.Row(y);
            for (int i = 0; i < outWidth; i++)
            {
                double s = 0;
                foreach (var (j, w) in wx[i]) s += src[j] * w;
                rows[y * outWidth + i] = (float)s;
            }
        }
        var result = new GrayImage(outWidth, outHeight);
        var wy = Weights(image.Height, outHeight, scale);
        for (int i = 0; i < outHeight; i++)
        {
            var dst = result.Row(i);
            foreach (var (j, w) in wy[i])
            {
                var src = rows.AsSpan(j * outWidth, outWidth);
                for (int x = 0; x < outWidth; x++) dst[x] += (float)(src[x] * w);
            }
        }
        return result;
    }

    private static (int Index, double Weight)[][] Weights(int inLength, int outLength, double scale)
    {
        var result = new (int, double)[outLength][];
        for (int i = 0; i < outLength; i++)
        {
            double a = i / scale, b = (i + 1) / scale;
            var list = new List<(int, double)>();
            double total = 0;
            for (int j = Math.Max(0, (int)Math.Floor(a)); j < Math.Min(inLength, (int)Math.Ceiling(b)); j++)
            {
                double w = Math.Min(b, j + 1) - Math.Max(a, j);
                if (w <= 0) continue;
                list.Add((j, w));
                total += w;
            }
            // The last output pixel may hang over the input's edge: average what it does cover.
            result[i] = total > 0 ? list.Select(p => (p.Item1, p.Item2 / total)).ToArray() : [(inLength - 1, 1.0)];
        }
        return result;
    }

    /// <summary>
    /// Otsu's threshold (Otsu 1979, IEEE Trans. Syst. Man Cybern. 9:62): the level that maximises the
    /// between-class variance of a 256-bin histogram over [min, max]. Returns min when all values are equal.
    /// </summary>
    public static float OtsuThreshold(ReadOnlySpan<float> values)
    {
        float min = float.MaxValue, max = float.MinValue;
        foreach (var v in values) { if (v < min) min = v; if (v > max) max = v; }
        if (!(max > min)) return min;
        const int bins = 256;
        var hist = new long[bins];
        double binWidth = (max - min) / bins;
        foreach (var v in values) hist[Math.Min(bins - 1, (int)((v - min) / binWidth))]++;
        double total = values.Length, sumAll = 0;
        for (int i = 0; i < bins; i++) sumAll += i * (double)hist[i];
        double weightBelow = 0, sumBelow = 0, best = -1;
        int bestBin = 0;
        for (int i = 0; i < bins; i++)
        {
            weightBelow += hist[i];
            if (weightBelow == 0) continue;
            double weightAbove = total - weightBelow;
            if (weightAbove == 0) break;
            sumBelow += i * (double)hist[i];
            double meanBelow = sumBelow / weightBelow, meanAbove = (sumAll - sumBelow) / weightAbove;
            double between = weightBelow * weightAbove * (meanBelow - meanAbove) * (meanBelow - meanAbove);
            if (between > best) { best = between; bestBin = i; }
        }
        // Threshold at the upper edge of the last bin of the lower class.
        return (float)(min + (bestBin + 1) * binWidth);
    }

    /// <summary>The value at quantile q ∈ [0, 1] (nearest rank) of a sample of at most ~1 million values.</summary>
    public static float Percentile(ReadOnlySpan<float> values, double q)
    {
        int step = Math.Max(1, values.Length / 1_000_000);
        var sample = new float[(values.Length + step - 1) / step];
        for (int i = 0, k = 0; i < values.Length; i += step) sample[k++] = values[i];
        Array.Sort(sample);
        return sample[Math.Clamp((int)Math.Round(q * (sample.Length - 1)), 0, sample.Length - 1)];
    }

    /// <summary>
    /// Resamples <paramref name="source"/> (size n×n) so that output(p) = source(T⁻¹·p) for the map T given:
    /// the content moves by T. Bilinear; outside the source the output is 0.
    /// Writes <paramref name="output"/> and returns nothing so callers can reuse buffers.
    /// </summary>
    public static void Warp(ReadOnlySpan<float> source, int n, Transform2D moveBy, Span<float> output)
    {
        var inv = moveBy.Inverse();
        for (int y = 0; y < n; y++)
        {
            double sx = inv.M01 * y + inv.M02, sy = inv.M11 * y + inv.M12;
            for (int x = 0; x < n; x++, sx += inv.M00, sy += inv.M10)
            {
                float v = 0;
                if (sx > -1 && sy > -1 && sx < n && sy < n)
                {
                    int x0 = (int)Math.Floor(sx), y0 = (int)Math.Floor(sy);
                    v = Bilinear.Canvas(source, n, x0, y0, (float)(sx - x0), (float)(sy - y0));
                }
                output[y * n + x] = v;
            }
        }
    }

    /// <summary>
    /// <see cref="Warp(ReadOnlySpan{float}, int, Transform2D, Span{float})"/> of a source that is zero outside
    /// <paramref name="nonZero"/> (inclusive pixel box; X1 &lt; X0 when the source is all zero), with the same output bit
    /// for bit: a sample whose four neighbours all lie outside the box is +0 either way (bilinear interpolation of ±0
    /// values gives +0), so it is written without reading them, and the neighbours of a sample inside the canvas are read
    /// without bounds checks. The sample positions are stepped along each row exactly as there.
    /// </summary>
    public static void Warp(ReadOnlySpan<float> source, int n, Transform2D moveBy, Span<float> output, (int X0, int Y0, int X1, int Y1) nonZero)
    {
        var inv = moveBy.Inverse();
        double loX = nonZero.X0 - 1, hiX = nonZero.X1 + 1, loY = nonZero.Y0 - 1, hiY = nonZero.Y1 + 1;
        for (int y = 0; y < n; y++)
        {
            double sx = inv.M01 * y + inv.M02, sy = inv.M11 * y + inv.M12;
            for (int x = 0; x < n; x++, sx += inv.M00, sy += inv.M10)
            {
                float v = 0;
                if (sx > -1 && sy > -1 && sx < n && sy < n && sx >= loX && sx < hiX && sy >= loY && sy < hiY)
                {
                    int x0 = (int)Math.Floor(sx), y0 = (int)Math.Floor(sy);
                    v = Bilinear.CanvasFast(source, n, x0, y0, (float)(sx - x0), (float)(sy - y0));
                }
                output[y * n + x] = v;
            }
        }
    }
}
