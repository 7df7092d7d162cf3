using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Register;

/// <summary>Which way round tissue and background are in the scans.</summary>
public enum TissuePolarity
{
    /// <summary>Decide per section: a border brighter than the image's mean means a bright (brightfield) slide.</summary>
    Auto,
    /// <summary>Tissue brighter than the background (fluorescence, dark-field, MRI).</summary>
    BrightOnDark,
    /// <summary>Tissue darker than the background (brightfield stains on a lit slide): the image is inverted.</summary>
    DarkOnBright,
}

/// <summary>
/// Turning a full-resolution section scan into the working image registration compares: reduce to the working
/// size, make tissue bright on a dark background, normalise robustly, and find the tissue.
/// </summary>
public static class Preprocessing
{
    /// <summary>
    /// The reduction factor (≤ 1) that makes the long side at most <paramref name="workSize"/>, and the map
    /// from full-resolution pixel coordinates to working ones: x_work = (x + 0.5)·s − 0.5 (pixel centres,
    /// pixel edges kept in place).
    /// </summary>
    public static (double Scale, Transform2D FullToWork) WorkScale(int width, int height, int workSize)
    {
        if (workSize < 8) throw new ArgumentOutOfRangeException(nameof(workSize), "The working size must be at least 8 pixels.");
        double s = Math.Min(1.0, workSize / (double)Math.Max(width, height));
        return (s, ScaleMap(s));
    }

    internal static Transform2D ScaleMap(double s) => Resampler.EdgeAlignedScale(s);

    /// <summary>Area-averaged reduction by <paramref name="scale"/> (≤ 1); scale 1 returns a copy.</summary>
    public static GrayImage Reduce(GrayImage image, double scale)
    {
        if (scale >= 1) return image.Clone();
        int w = Math.Max(1, (int)Math.Round(image.Width * scale)), h = Math.Max(1, (int)Math.Round(image.Height * scale));
        return ImageOps.Reduce(image, scale, w, h);
    }

    /// <summary>
    /// True when the slide background is bright (brightfield): the median of the outermost pixels (a band of
    /// 2 % of the short side, at least one pixel) is above the mean of the whole image. Tissue, being darker, pulls
    /// the mean below the border there; on a dark background it pulls the mean above the border.
    /// </summary>
    public static bool HasBrightBackground(GrayImage image)
    {
        int w = image.Width, h = image.Height;
        int band = Math.Max(1, (int)(0.02 * Math.Min(w, h)));
        var border = new List<float>();
        for (int y = 0; y < h; y++)
        {
            bool edgeRow = y < band || y >= h - band;
            for (int x = 0; x < w; x++)
                if (edgeRow || x < band || x >= w - band) border.Add(image[x, y]);
        }
        double mean = image.Pixels.Average(v => (double)v);
        return ImageOps.Percentile(border.ToArray(), 0.5) > mean;
    }

    /// <summary>
    /// Maps the <paramref name="low"/> and <paramref name="high"/> quantiles to 0 and 1 and clamps to [0, 1]
    /// (robust to dust, saturated spots and a few dead pixels). A flat image becomes all zeros. Returns the map it applied:
    /// each value v became <see cref="Normalised"/>(v, lo, range).
    /// </summary>
    public static (float Lo, float Range) NormaliseRobustRange(Span<float> pixels, double low = 0.01, double high = 0.995)
    {
        float lo = ImageOps.Percentile(pixels, low), hi = ImageOps.Percentile(pixels, high);
        if (!(hi > lo))
        {
            // Most pixels equal (e.g. a wide empty background): fall back to the full range.
            lo = float.MaxValue; hi = float.MinValue;
            foreach (var v in pixels) { lo = Math.Min(lo, v); hi = Math.Max(hi, v); }
        }
        float range = hi - lo;
        for (int i = 0; i < pixels.Length; i++) pixels[i] = Normalised(pixels[i], lo, range);
        return (lo, range);
    }

    /// <summary>One value under <see cref="NormaliseRobustRange"/>'s map (the same float operations, so the same bits).</summary>
    public static float Normalised(float v, float lo, float range) => range > 0 ? Math.Clamp((v - lo) / range, 0f, 1f) : 0f;

    /// <summary>
    /// The tissue: pixels of the Gaussian-smoothed image (σ = <paramref name="sigma"/> px) above its Otsu
    /// threshold (Otsu 1979, IEEE Trans. Syst. Man Cybern. 9:62). Expects tissue bright on dark.
    /// A flat image gives an empty mask.
    /// </summary>
    public static bool[] TissueMask(ReadOnlySpan<float> pixels, int width, int height, double sigma = 2)
    {
        var smooth = GaussianFilter.BlurSingle(pixels, width, height, sigma);
        float t = ImageOps.OtsuThreshold(smooth);
        var mask = new bool[smooth.Length];
        for (int i = 0; i < mask.Length; i++) mask[i] = smooth[i] > t;
        return mask;
    }

    /// <summary>The tissue mask feathered by a Gaussian of σ = 3 px, values in [0, 1].</summary>
    internal static float[] SoftTissueMask(ReadOnlySpan<float> pixels, int width, int height) =>
        Feather(TissueMask(pixels, width, height), width, height);

    /// <summary>A binary mask feathered by a Gaussian of σ = 3 px, values in [0, 1].</summary>
    internal static float[] Feather(bool[] mask, int width, int height)
    {
        var f = new float[mask.Length];
        for (int i = 0; i < f.Length; i++) f[i] = mask[i] ? 1f : 0f;
        return GaussianFilter.BlurSingle(f, width, height, 3);
    }
}
