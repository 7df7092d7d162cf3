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
        return Reslicer.Reslice(volume, plane, new ResliceOptions(MaxThreads: 0));
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

    public static byte[] Gray(GrayImage image, IntensityWindow window)
    {
        using var stream = new MemoryStream();
        PlanePng.Write(stream, image, window);
        return stream.ToArray();
    }

    /// <summary>
    /// Two planes of the same size in one colour image: <paramref name="first"/> in magenta, <paramref name="second"/>
    /// in green, so where both agree the tissue is grey and misplacement shows as coloured fringes (common practice
    /// for checking registration).
    /// </summary>
    public static byte[] Overlay(GrayImage first, GrayImage second, IntensityWindow window)
    {
        var a = PlanePng.ToGray8(first, window);
        var b = PlanePng.ToGray8(second, window);
        var pixels = new Rgb24[a.Length];
        for (int i = 0; i < a.Length; i++) pixels[i] = new Rgb24(a[i], b[i], a[i]);
        using var image = Image.LoadPixelData<Rgb24>(pixels, first.Width, first.Height);
        using var stream = new MemoryStream();
        image.SaveAsPng(stream, new PngEncoder { ChunkFilter = PngChunkFilter.ExcludeAll });
        return stream.ToArray();
    }

    /// <summary>The anatomical letter towards which a voxel axis (0 = i, 1 = j, 2 = k) points, from the axis codes.</summary>
    public static string Letter(string axisCodes, int axis) => axisCodes.Length == 3 ? axisCodes[axis].ToString() : "ijk"[axis].ToString();
}
