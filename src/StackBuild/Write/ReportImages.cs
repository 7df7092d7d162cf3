using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using StackBuild.Reslice;

namespace StackBuild.Write;

/// <summary>Planes of the built volume for the report, as PNG bytes.</summary>
internal static class ReportImages
{
    /// <summary>A plane of the volume no larger than <paramref name="maxSide"/> pixels a side (coarser pixels when needed).</summary>
    public static GrayImage Plane(Volume volume, PlaneSpec spec, int maxSide)
    {
        var plane = spec.Build(volume);
        int side = Math.Max(plane.Width, plane.Height);
        if (side > maxSide)
            plane = (spec with { PixelSizeMm = plane.PixelSizeMm * side / maxSide }).Build(volume);
        // Outside the volume is NaN, written transparent, so a tilted plane's corners show the page rather than black.
        return Reslicer.Reslice(volume, plane, new ResliceOptions(Fill: float.NaN, MaxThreads: 0));
    }

    /// <summary>Plane <paramref name="k"/> of the volume (a section as placed), scaled down to at most <paramref name="maxSide"/> pixels a side.</summary>
    public static GrayImage SectionPlane(Volume volume, int k, int maxSide)
    {
        var full = new GrayImage(volume.Nx, volume.Ny, volume.Plane(k).ToArray());
        double scale = Math.Min(1, maxSide / (double)Math.Max(volume.Nx, volume.Ny));
        if (scale >= 1) return full;
        int w = Math.Max(1, (int)Math.Round(volume.Nx * scale)), h = Math.Max(1, (int)Math.Round(volume.Ny * scale));
        // Area-like reduction: sample the box-reduced grid's centres bilinearly (enough for a thumbnail).
        return Resampler.Warp(full, Resampler.EdgeAlignedScale(scale).Inverse(), w, h, 0f);
    }

    /// <summary>A windowed grey PNG; when some pixels are NaN (outside the volume) they are written transparent.</summary>
    public static byte[] Gray(GrayImage image, IntensityWindow window)
    {
        using var stream = new MemoryStream();
        if (!image.Pixels.Any(float.IsNaN))
        {
            PlanePng.Write(stream, image, window);
            return stream.ToArray();
        }
        var gray = PlanePng.ToGray8(image, window);
        var pixels = new La16[gray.Length];
        for (int i = 0; i < gray.Length; i++) pixels[i] = new La16(gray[i], float.IsNaN(image.Pixels[i]) ? (byte)0 : (byte)255);
        using var png = Image.LoadPixelData<La16>(pixels, image.Width, image.Height);
        png.SaveAsPng(stream, new PngEncoder { ColorType = PngColorType.GrayscaleWithAlpha, BitDepth = PngBitDepth.Bit8, ChunkFilter = PngChunkFilter.ExcludeAll });
        return stream.ToArray();
    }

    /// <summary>
    /// Two planes of the same size in one colour image: <paramref name="first"/> in magenta, <paramref name="second"/>
    /// in green, so where both agree the tissue is grey and misplacement shows as coloured fringes (common practice
    /// for checking registration). Each plane is first scaled by its own window (<see cref="OwnWindow"/>), so two
    /// sections that differ only in staining strength or scanner gain still read grey where they agree.
    /// </summary>
    public static byte[] Overlay(GrayImage first, GrayImage second)
    {
        var a = PlanePng.ToGray8(first, OwnWindow(first));
        var b = PlanePng.ToGray8(second, OwnWindow(second));
        var pixels = new Rgb24[a.Length];
        for (int i = 0; i < a.Length; i++) pixels[i] = new Rgb24(a[i], b[i], a[i]);
        using var image = Image.LoadPixelData<Rgb24>(pixels, first.Width, first.Height);
        using var stream = new MemoryStream();
        image.SaveAsPng(stream, new PngEncoder { ChunkFilter = PngChunkFilter.ExcludeAll });
        return stream.ToArray();
    }

    /// <summary>One plane's own window for the overlay: its 0.5th to 99.5th percentiles (as the volume's default window).</summary>
    internal static IntensityWindow OwnWindow(GrayImage image) =>
        IntensityWindow.FromPercentiles(image.Pixels, IntensityWindow.DefaultLowPercentile, IntensityWindow.DefaultHighPercentile);

    /// <summary>The anatomical letter towards which a voxel axis (0 = i, 1 = j, 2 = k) points, from the axis codes.</summary>
    public static string Letter(string axisCodes, int axis) => axisCodes.Length == 3 ? axisCodes[axis].ToString() : "ijk"[axis].ToString();
}
