using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Reslice;

/// <summary>A resliced plane as a windowed grey PNG (8 or 16 bits), the one encoding the CLI and the viewer share.</summary>
public static class PlanePng
{
    /// <summary>
    /// Maps each pixel linearly from the window to [0, 2^bits − 1] (clipped, rounded to nearest) and writes a
    /// grey PNG without gamma or other colour chunks, so browsers show the stored values as they are.
    /// </summary>
    public static void Write(Stream stream, GrayImage plane, IntensityWindow window, int bits = 8, bool fast = false)
    {
        var encoder = new PngEncoder
        {
            ColorType = PngColorType.Grayscale,
            BitDepth = bits == 16 ? PngBitDepth.Bit16 : PngBitDepth.Bit8,
            CompressionLevel = fast ? PngCompressionLevel.BestSpeed : PngCompressionLevel.DefaultCompression,
            ChunkFilter = PngChunkFilter.ExcludeAll,
        };
        if (bits == 16)
        {
            using var image = Image.LoadPixelData<L16>(ToGray16(plane, window), plane.Width, plane.Height);
            image.SaveAsPng(stream, encoder);
        }
        else if (bits == 8)
        {
            using var image = Image.LoadPixelData<L8>(ToGray8(plane, window), plane.Width, plane.Height);
            image.SaveAsPng(stream, encoder);
        }
        else throw new ArgumentOutOfRangeException(nameof(bits), "PNG planes are 8 or 16 bits.");
    }

    /// <summary>Writes the PNG to <paramref name="path"/> via <see cref="AtomicFile"/>.</summary>
    public static void WriteFile(string path, GrayImage plane, IntensityWindow window, int bits = 8) =>
        AtomicFile.Write(path, s => Write(s, plane, window, bits));

    public static byte[] ToGray8(GrayImage plane, IntensityWindow window)
    {
        var result = new byte[plane.Pixels.Length];
        Scale(plane.Pixels, window, 255, (i, v) => result[i] = (byte)v);
        return result;
    }

    public static L16[] ToGray16(GrayImage plane, IntensityWindow window)
    {
        var result = new L16[plane.Pixels.Length];
        Scale(plane.Pixels, window, 65535, (i, v) => result[i] = new L16((ushort)v));
        return result;
    }

    private static void Scale(float[] pixels, IntensityWindow window, int top, Action<int, int> set)
    {
        double gain = top / (window.High - window.Low);
        for (int i = 0; i < pixels.Length; i++)
        {
            double v = (pixels[i] - window.Low) * gain;
            // NaN (no data) shows as black, like values below the window.
            set(i, double.IsNaN(v) ? 0 : (int)Math.Clamp(Math.Round(v, MidpointRounding.AwayFromZero), 0, top));
        }
    }
}
