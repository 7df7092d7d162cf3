using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;

namespace StackBuild.Reslice;

/// <summary>
/// An overlay plane as colour with transparency (the viewer's layers and <c>stackbuild reslice --overlay</c> share
/// these). Pixels outside the overlay's grid (NaN) are transparent. Each layer's opacity is applied when the layers are
/// composed (<see cref="PlaneFigure"/>, or the page); these images carry only what the layer shows where.
/// </summary>
public static class OverlayColours
{
    /// <summary>
    /// Intensities in one colour: the colour of <paramref name="hue"/> everywhere, with the windowed value (0–255,
    /// as the grey planes map it) as the pixel's alpha, so faint signal fades out and strong signal covers.
    /// </summary>
    public static Rgba32[] Tint(GrayImage plane, IntensityWindow window, int hue)
    {
        var alpha = PlanePng.ToGray8(plane, window);
        var (r, g, b) = Hsl(hue, 0.9, 0.55);
        var pixels = new Rgba32[alpha.Length];
        for (int p = 0; p < pixels.Length; p++)
            pixels[p] = new Rgba32(r, g, b, float.IsNaN(plane.Pixels[p]) ? (byte)0 : alpha[p]);
        return pixels;
    }

    /// <summary>Every non-zero label in its own flat colour (<see cref="LabelColour"/>); label 0 is background, transparent.</summary>
    public static Rgba32[] Fill(GrayImage labels)
    {
        var pixels = new Rgba32[labels.Pixels.Length];
        for (int p = 0; p < pixels.Length; p++)
        {
            float v = labels.Pixels[p];
            if (v != 0 && !float.IsNaN(v)) pixels[p] = LabelColour(v);
        }
        return pixels;
    }

    /// <summary>
    /// Only the edge of each non-zero label region: a pixel whose label differs from one of its four neighbours (or
    /// that lies on the image's edge), in the label's colour.
    /// </summary>
    public static Rgba32[] Outline(GrayImage labels)
    {
        int w = labels.Width, h = labels.Height;
        var v = labels.Pixels;
        var pixels = new Rgba32[v.Length];
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            int p = y * w + x;
            float l = v[p];
            if (l == 0 || float.IsNaN(l)) continue;
            bool edge = x == 0 || y == 0 || x == w - 1 || y == h - 1
                || v[p - 1] != l || v[p + 1] != l || v[p - w] != l || v[p + w] != l;
            if (edge) pixels[p] = LabelColour(l);
        }
        return pixels;
    }

    /// <summary>
    /// A label's colour: hues a golden angle (137.5°) apart for successive label numbers, so neighbouring numbers
    /// get clearly different colours; the same label always gets the same colour.
    /// </summary>
    public static Rgba32 LabelColour(float label)
    {
        double hue = ((double)label * 137.50776405) % 360;
        if (hue < 0) hue += 360;
        // Alternate lightness too, so two labels with close hues still differ.
        var (r, g, b) = Hsl(hue, 0.72, (long)Math.Abs(Math.Round(label)) % 2 == 0 ? 0.50 : 0.62);
        return new Rgba32(r, g, b, 255);
    }

    public static void WritePng(Stream stream, Rgba32[] pixels, int width, int height)
    {
        using var image = Image.LoadPixelData<Rgba32>(pixels, width, height);
        image.SaveAsPng(stream, new PngEncoder
        {
            ColorType = PngColorType.RgbWithAlpha, BitDepth = PngBitDepth.Bit8,
            CompressionLevel = PngCompressionLevel.BestSpeed, ChunkFilter = PngChunkFilter.ExcludeAll,
        });
    }

    /// <summary>The colours given to intensity overlays in order (hue in degrees): amber, green, cyan, blue, magenta, red.</summary>
    public static IReadOnlyList<int> Hues { get; } = [32, 130, 188, 222, 300, 0];

    private static (byte R, byte G, byte B) Hsl(double hue, double saturation, double lightness)
    {
        double c = (1 - Math.Abs(2 * lightness - 1)) * saturation;
        double h = hue / 60, x = c * (1 - Math.Abs(h % 2 - 1)), m = lightness - c / 2;
        var (r, g, b) = h switch
        {
            < 1 => (c, x, 0.0), < 2 => (x, c, 0.0), < 3 => (0.0, c, x),
            < 4 => (0.0, x, c), < 5 => (x, 0.0, c), _ => (c, 0.0, x),
        };
        static byte B(double v) => (byte)Math.Clamp(Math.Round(v * 255), 0, 255);
        return (B(r + m), B(g + m), B(b + m));
    }
}
