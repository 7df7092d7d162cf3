using StackBuild.Geometry;

namespace StackBuild.Imaging;

public enum Interpolation { Bilinear, Bicubic }

/// <summary>Resampling an image through a 2D map (our pixel convention; see <see cref="Transform2D"/>).</summary>
public static class Resampler
{
    /// <summary>
    /// Writes into <paramref name="destination"/> (row-major, <paramref name="width"/> × <paramref name="height"/>)
    /// the source sampled at <c>destinationToSource(x, y)</c> for every destination pixel; samples that fall
    /// outside the source get <paramref name="fill"/>. Rows run in parallel.
    /// </summary>
    public static void Warp(GrayImage source, Transform2D destinationToSource, Span<float> destination, int width, int height,
        float fill, Interpolation interpolation = Interpolation.Bilinear)
    {
        if (destination.Length < (long)width * height) throw new ArgumentException("The destination is smaller than width × height.");
        unsafe
        {
            fixed (float* d = destination)
            {
                var ptr = (IntPtr)d;
                Parallel.For(0, height, y =>
                {
                    var row = new Span<float>((float*)ptr + (long)y * width, width);
                    var (sx, sy) = destinationToSource.Apply(0, y);
                    double dx = destinationToSource.M00, dy = destinationToSource.M10;
                    for (int x = 0; x < width; x++, sx += dx, sy += dy)
                        row[x] = interpolation == Interpolation.Bicubic ? SampleBicubic(source, sx, sy, fill) : source.SampleBilinear(sx, sy, fill);
                });
            }
        }
    }

    /// <summary>A new image of the given size sampled through <paramref name="destinationToSource"/>.</summary>
    public static GrayImage Warp(GrayImage source, Transform2D destinationToSource, int width, int height, float fill,
        Interpolation interpolation = Interpolation.Bilinear)
    {
        var result = new GrayImage(width, height);
        Warp(source, destinationToSource, result.Pixels, width, height, fill, interpolation);
        return result;
    }

    /// <summary>Bicubic sample (<see cref="CubicConvolution"/>); <paramref name="outside"/> beyond the image's pixel edges.</summary>
    public static float SampleBicubic(GrayImage image, double x, double y, float outside)
    {
        if (x < -0.5 || y < -0.5 || x > image.Width - 0.5 || y > image.Height - 0.5) return outside;
        int x0 = (int)Math.Floor(x), y0 = (int)Math.Floor(y);
        return CubicConvolution.Sample(image, x0, y0, x - x0, y - y0);
    }

    /// <summary>
    /// The map from full-resolution pixel coordinates to those of an image reduced by integer blocks of
    /// <paramref name="factor"/> (the block's centre: x_full = f·x + (f − 1)/2).
    /// </summary>
    public static Transform2D FullToBlockReduced(int factor) =>
        Transform2D.Translation(-(factor - 1) / 2.0, -(factor - 1) / 2.0).Then(Transform2D.Scale(1.0 / factor));

    /// <summary>Pixel coordinates of an image to those of the same field of view at <paramref name="scale"/> times the pixel count (pixel edges kept).</summary>
    public static Transform2D EdgeAlignedScale(double scale) =>
        Transform2D.Scale(scale).Then(Transform2D.Translation(0.5 * scale - 0.5, 0.5 * scale - 0.5));
}
