using StackBuild.Geometry;

namespace StackBuild.Frame;

/// <summary>
/// How the output volume faces and how far it reaches: the user's choice of frame, applied after the sections
/// are placed relative to each other.
/// </summary>
/// <remarks>
/// The in-plane frame is the frame of one section (the reference) as it lay on its slide; the volume is then
/// turned upright (<see cref="Upright"/>), turned by <see cref="RotateDegrees"/> and mirrored (<see cref="Mirror"/>),
/// in that order, all about the reference section's centre. <c>--axes</c> then names where image right, image
/// down and increasing section number point in the specimen.
/// </remarks>
public sealed record FrameOptions
{
    /// <summary>The section whose frame, as scanned, the volume takes; null = the confident section nearest the middle of the stack.</summary>
    public int? ReferenceSection { get; init; }
    /// <summary>Turn of the whole volume in the section plane, in degrees, clockwise as displayed (image y down).</summary>
    public double RotateDegrees { get; init; }
    /// <summary>Mirror the whole volume left–right (after the turn).</summary>
    public bool Mirror { get; init; }
    /// <summary>Turn the volume so the specimen's midline (symmetry axis) is vertical.</summary>
    public bool Upright { get; init; }
    /// <summary>True: crop the grid to the tissue of all sections plus <see cref="MarginUm"/>; false: keep every canvas.</summary>
    public bool CropToTissue { get; init; } = true;
    /// <summary>Margin around the tissue, in µm, when cropping.</summary>
    public double MarginUm { get; init; } = DefaultMarginUm;
    /// <summary>World position (RAS+ mm) of the tissue's centre: the middle of its bounding box in the plane and of the stack along the sections.</summary>
    public (double X, double Y, double Z) CentreMm { get; init; }

    public const double DefaultMarginUm = 250;
}

/// <summary>The rectangle of the output plane the volume keeps, in output-plane pixel coordinates (before cropping).</summary>
public readonly record struct PlaneBox(double MinX, double MinY, double MaxX, double MaxY)
{
    public static PlaneBox Empty => new(double.MaxValue, double.MaxValue, double.MinValue, double.MinValue);
    public bool IsEmpty => MinX > MaxX || MinY > MaxY;
    public double CentreX => (MinX + MaxX) / 2;
    public double CentreY => (MinY + MaxY) / 2;

    public PlaneBox Including(double x, double y) =>
        new(Math.Min(MinX, x), Math.Min(MinY, y), Math.Max(MaxX, x), Math.Max(MaxY, y));

    public PlaneBox Grown(double by) => IsEmpty ? this : new(MinX - by, MinY - by, MaxX + by, MaxY + by);

    public PlaneBox Intersect(PlaneBox other) =>
        new(Math.Max(MinX, other.MinX), Math.Max(MinY, other.MinY), Math.Min(MaxX, other.MaxX), Math.Min(MaxY, other.MaxY));
}

/// <summary>The frame's pure geometry: the in-plane turn and mirror, the tissue box, the affine's origin.</summary>
public static class OutputFrame
{
    /// <summary>
    /// The in-plane map applied to every placement after the sections are placed in the reference frame:
    /// upright turn, then <paramref name="rotateDegrees"/> (clockwise as displayed), then the mirror, all about (cx, cy).
    /// </summary>
    public static Transform2D Adjustment(double uprightDegrees, double rotateDegrees, bool mirror, double cx, double cy) =>
        Transform2D.Rotation(uprightDegrees + rotateDegrees, cx, cy).Then(mirror ? Transform2D.MirrorX(cx) : Transform2D.Identity);

    /// <summary>
    /// The box around the tissue pixels of one section's mask (row-major, <paramref name="width"/> wide), each pixel
    /// taken as its full square, after mapping with <paramref name="toPlane"/>. Only pixels on the mask's edge are
    /// mapped (interior pixels cannot widen the box).
    /// </summary>
    public static PlaneBox TissueBox(bool[] mask, int width, int height, Transform2D toPlane)
    {
        var box = PlaneBox.Empty;
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            if (!mask[y * width + x]) continue;
            bool edge = x == 0 || y == 0 || x == width - 1 || y == height - 1
                || !mask[y * width + x - 1] || !mask[y * width + x + 1] || !mask[(y - 1) * width + x] || !mask[(y + 1) * width + x];
            if (!edge) continue;
            foreach (var (dx, dy) in Corners)
            {
                var p = toPlane.Apply(x + dx, y + dy);
                box = box.Including(p.X, p.Y);
            }
        }
        return box;
    }

    private static readonly (double, double)[] Corners = [(-0.5, -0.5), (0.5, -0.5), (-0.5, 0.5), (0.5, 0.5)];

    /// <summary>
    /// A mask without isolated specks: tissue pixels that keep at least <paramref name="minNeighbours"/> of their 8
    /// neighbours as tissue. Dust and label edges are often a pixel or two wide at registration size; they would
    /// otherwise stretch the tissue box.
    /// </summary>
    public static bool[] WithoutSpecks(bool[] mask, int width, int height, int minNeighbours = 5)
    {
        var result = new bool[mask.Length];
        for (int y = 1; y < height - 1; y++)
        for (int x = 1; x < width - 1; x++)
        {
            int i = y * width + x;
            if (!mask[i]) continue;
            int n = 0;
            for (int dy = -1; dy <= 1; dy++)
            for (int dx = -1; dx <= 1; dx++)
                if ((dx != 0 || dy != 0) && mask[i + dy * width + dx]) n++;
            result[i] = n >= minNeighbours;
        }
        return result;
    }

    /// <summary>
    /// <paramref name="affine"/> moved (its translation only) so that voxel (i, j, k) lands on <paramref name="world"/>.
    /// </summary>
    public static Affine PlacePointAt(Affine affine, (double I, double J, double K) voxel, (double X, double Y, double Z) world)
    {
        var now = affine.Apply(voxel.I, voxel.J, voxel.K);
        var rows = affine.ToRows();
        rows[0][3] += world.X - now.X;
        rows[1][3] += world.Y - now.Y;
        rows[2][3] += world.Z - now.Z;
        return Affine.FromRows(rows[0], rows[1], rows[2]);
    }
}
