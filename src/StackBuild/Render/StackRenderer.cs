using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Render;

/// <summary>How one section lands in the output volume.</summary>
/// <param name="ImageToPlane">Maps full-resolution input pixel coordinates to (i, j) voxel coordinates of the section's plane.</param>
/// <param name="PlaneIndex">The k index of the plane in the output volume.</param>
public sealed record PlacedSection(int PlaneIndex, Transform2D ImageToPlane);

public enum Interpolation { Bilinear, Bicubic }

/// <summary>Resamples sections into the planes of an output volume.</summary>
public static class StackRenderer
{
    /// <summary>
    /// Resamples <paramref name="image"/> (which is <paramref name="imageToFull"/> away from full resolution:
    /// full-resolution px per image px) into plane <paramref name="placement"/>.PlaneIndex of
    /// <paramref name="volume"/>. Output voxels whose source falls outside the image get <paramref name="fill"/>.
    /// </summary>
    public static void RenderSection(Volume volume, PlacedSection placement, GrayImage image, double imageToFull,
        float fill, Interpolation interpolation = Interpolation.Bilinear)
    {
        // plane (i,j) → full-res pixel → loaded image pixel
        var planeToImage = placement.ImageToPlane.Inverse().Then(Transform2D.Scale(1.0 / imageToFull));
        int nx = volume.Nx;
        var plane = volume.Voxels;
        long offset = (long)placement.PlaneIndex * volume.Nx * volume.Ny;
        Parallel.For(0, volume.Ny, j =>
        {
            var (x, y) = planeToImage.Apply(0, j);
            double dx = planeToImage.M00, dy = planeToImage.M10;
            long row = offset + (long)j * nx;
            for (int i = 0; i < nx; i++, x += dx, y += dy)
                plane[row + i] = interpolation == Interpolation.Bicubic
                    ? SampleBicubic(image, x, y, fill)
                    : image.SampleBilinear(x, y, fill);
        });
    }

    /// <summary>Catmull-Rom bicubic sample (Keys 1981, IEEE TASSP 29:1153, a = −0.5).</summary>
    public static float SampleBicubic(GrayImage image, double x, double y, float outside)
    {
        if (x < -0.5 || y < -0.5 || x > image.Width - 0.5 || y > image.Height - 0.5) return outside;
        int x0 = (int)Math.Floor(x), y0 = (int)Math.Floor(y);
        double tx = x - x0, ty = y - y0;
        Span<double> wx = stackalloc double[4];
        Span<double> wy = stackalloc double[4];
        Weights(tx, wx);
        Weights(ty, wy);
        double sum = 0;
        for (int m = 0; m < 4; m++)
        {
            int yy = Math.Clamp(y0 - 1 + m, 0, image.Height - 1);
            double rowSum = 0;
            for (int n = 0; n < 4; n++)
            {
                int xx = Math.Clamp(x0 - 1 + n, 0, image.Width - 1);
                rowSum += wx[n] * image.Pixels[yy * image.Width + xx];
            }
            sum += wy[m] * rowSum;
        }
        return (float)sum;
    }

    private static void Weights(double t, Span<double> w)
    {
        const double a = -0.5;
        double t2 = t * t, t3 = t2 * t;
        w[0] = a * (t3 - 2 * t2 + t);
        w[1] = (a + 2) * t3 - (a + 3) * t2 + 1;
        w[2] = -(a + 2) * t3 + (2 * a + 3) * t2 - a * t;
        w[3] = -a * (t3 - t2);
    }

    /// <summary>Fills a whole plane with one value (gaps, excluded sections).</summary>
    public static void FillPlane(Volume volume, int k, float value) => volume.Plane(k).Fill(value);
}
