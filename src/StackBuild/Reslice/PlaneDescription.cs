using System.Text.Json;
using System.Text.Json.Serialization;
using StackBuild.Imaging;

namespace StackBuild.Reslice;

/// <summary>
/// Everything about one resliced plane that a reader needs to place its pixels: how it was asked for, where it
/// lies, its corners in mm and voxels, and the polygon where it meets the volume's box of voxel cells (in voxel
/// indices and in the plane's own pixel coordinates). Serialised as JSON by <c>stackbuild reslice --json</c> and by the viewer.
/// </summary>
public sealed record PlaneDescription(
    string Orientation,
    double TiltAboutHorizontalDeg,
    double TiltAboutVerticalDeg,
    double OffsetMm,
    double OffsetMinMm,
    double OffsetMaxMm,
    string Interpolation,
    int Width,
    int Height,
    double PixelSizeMm,
    double[] CentreMm,
    double[] RightDirection,
    double[] DownDirection,
    double[] DepthDirection,
    double[][] PixelToWorldMm,
    double[][] PixelToVoxel,
    IReadOnlyList<CornerDescription> Corners,
    IReadOnlyList<double[]> CutVoxel,
    IReadOnlyList<double[]> CutPixel)
{
    public static JsonSerializerOptions JsonOptions { get; } = new(JsonSerializerDefaults.Web)
    {
        WriteIndented = false,
        NumberHandling = JsonNumberHandling.Strict,
    };

    public static PlaneDescription Of(Volume volume, PlaneSpec spec, ReslicePlane plane, ResliceSampling interpolation)
    {
        var (offsetMin, offsetMax) = spec.OffsetRange(volume);
        var toVoxel = volume.Affine.Inverse();
        var world = plane.PixelToWorldRows();
        // Voxel = A⁻¹·world, applied to the columns (steps are directions: no translation).
        var voxel = new double[3][];
        for (int r = 0; r < 3; r++)
        {
            voxel[r] = new double[3];
            for (int c = 0; c < 3; c++)
            {
                double s = c == 2 ? toVoxel[r, 3] : 0;
                for (int t = 0; t < 3; t++) s += toVoxel[r, t] * world[t][c];
                voxel[r][c] = s;
            }
        }
        var cut = PlaneCut.VoxelPolygon(volume, plane);
        var origin = plane.PixelToWorld(0, 0);
        var cutPixel = cut.Select(p =>
        {
            Vector3D w = volume.Affine.Apply(p.X, p.Y, p.Z);
            return new[] { (w - origin).Dot(plane.Right) / plane.PixelSizeMm, (w - origin).Dot(plane.Down) / plane.PixelSizeMm };
        }).ToArray();
        return new PlaneDescription(
            spec.Orientation.Name, spec.TiltAboutHorizontalDeg, spec.TiltAboutVerticalDeg, spec.OffsetMm, offsetMin, offsetMax,
            interpolation == ResliceSampling.Nearest ? "nearest" : "linear",
            plane.Width, plane.Height, plane.PixelSizeMm,
            plane.Centre.ToArray(), plane.Right.ToArray(), plane.Down.ToArray(), spec.Axes(volume.Affine).Depth.ToArray(),
            world, voxel,
            plane.Corners(volume.Affine).Select(c => new CornerDescription(c.Name, [c.PixelX, c.PixelY], c.WorldMm.ToArray(), c.Voxel.ToArray())).ToArray(),
            cut.Select(p => p.ToArray()).ToArray(),
            cutPixel);
    }

    public string ToJson(bool indented = false) =>
        JsonSerializer.Serialize(this, indented ? new JsonSerializerOptions(JsonOptions) { WriteIndented = true } : JsonOptions);
}

/// <summary>A corner pixel's centre: pixel coordinates, world mm (RAS+) and voxel indices (i, j, k).</summary>
public sealed record CornerDescription(string Name, int[] Pixel, double[] Mm, double[] Voxel);
