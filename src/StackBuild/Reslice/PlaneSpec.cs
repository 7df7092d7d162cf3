using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Reslice;

/// <summary>
/// How a user asks for a plane: a starting orientation, two tilts and a depth. Build it against a volume to get
/// the <see cref="ReslicePlane"/> to sample.
/// </summary>
/// <param name="Orientation">The untilted plane (see <see cref="PlaneOrientation"/>).</param>
/// <param name="TiltAboutHorizontalDeg">Tilt about the starting plane's horizontal (image x) axis, degrees in
/// [−90, 90]; positive turns the lower edge deeper (see <see cref="Axes"/>).</param>
/// <param name="TiltAboutVerticalDeg">Then tilt about the plane's vertical (image y) axis, degrees in [−90, 90];
/// positive turns the right edge deeper.</param>
/// <param name="OffsetMm">Shift of the tilted plane along its depth direction, in mm from the centre point.</param>
/// <param name="PixelSizeMm">Output pixel size; null = the volume's smallest voxel size.</param>
/// <param name="Width">Output width in pixels; null = wide enough to cover the volume.</param>
/// <param name="Height">Output height in pixels; null = high enough to cover the volume.</param>
public sealed record PlaneSpec(
    PlaneOrientation Orientation,
    double TiltAboutHorizontalDeg = 0,
    double TiltAboutVerticalDeg = 0,
    double OffsetMm = 0,
    double? PixelSizeMm = null,
    int? Width = null,
    int? Height = null)
{
    public const double MaxTiltDeg = 90;

    /// <summary>
    /// The plane this spec names in <paramref name="volume"/>. Raises <see cref="InputProblemException"/> (with
    /// <paramref name="source"/> as the file) for out-of-range values.
    /// </summary>
    /// <remarks>
    /// The centre point is the centre of the volume, moved along the voxel axis closest to the starting plane's
    /// normal to the middle voxel (index n/2), so the untilted plane at offset 0 passes through voxel centres
    /// (a real section rather than a blend of two). The tilts are applied as <see cref="Axes"/> describes.
    /// </remarks>
    public ReslicePlane Build(Volume volume, string? source = null)
    {
        Check(source);
        var (right, down, depth) = Axes(volume.Affine);
        var centre = CentrePoint(volume) + OffsetMm * depth;
        double pixel = PixelSizeMm ?? SmallestVoxelSize(volume.Affine);
        var (halfRight, halfDown) = HalfExtents(volume, centre, right, down);
        int width = Width ?? CoveringCount(halfRight, pixel);
        int height = Height ?? CoveringCount(halfDown, pixel);
        if (width > ReslicePlane.MaxPixels || height > ReslicePlane.MaxPixels)
            throw new InputProblemException(source,
                $"a plane of {width}×{height} pixels is too large (at most {ReslicePlane.MaxPixels} a side)",
                "give a larger pixel size or a smaller output size");
        return new ReslicePlane(centre, right, down, width, height, pixel);
    }

    /// <summary>
    /// The tilted plane's right and down directions and its depth direction (world unit vectors): the way a
    /// positive offset moves the plane. For a plane along two voxel axes the depth direction is that of the
    /// increasing third index (deeper = later sections for <c>section</c>); for anatomical letters it is
    /// right × down. Positive tilts turn the lower edge (about the horizontal axis), then the right edge (about
    /// the vertical axis), towards the depth direction.
    /// </summary>
    public (Vector3D Right, Vector3D Down, Vector3D Depth) Axes(Affine voxelToWorld)
    {
        var (right, down) = Orientation.Directions(voxelToWorld);
        var depth = right.Cross(down);
        if (Orientation.NormalAxis is int axis && depth.Dot(PlaneOrientation.Column(voxelToWorld, axis)) < 0) depth = -depth;
        double a = TiltAboutHorizontalDeg * Math.PI / 180, b = TiltAboutVerticalDeg * Math.PI / 180;
        (down, depth) = (Math.Cos(a) * down + Math.Sin(a) * depth, Math.Cos(a) * depth - Math.Sin(a) * down);
        (right, depth) = (Math.Cos(b) * right + Math.Sin(b) * depth, Math.Cos(b) * depth - Math.Sin(b) * right);
        // Re-normalise against rounding so the plane's checks for unit, perpendicular vectors hold.
        right = right.Normalized();
        down = (down - down.Dot(right) * right).Normalized();
        return (right, down, depth.Normalized());
    }

    /// <summary>
    /// The range of offsets (mm, along the tilted depth direction) at which the plane still cuts the volume's
    /// box of voxel cells.
    /// </summary>
    public (double Min, double Max) OffsetRange(Volume volume)
    {
        var (_, _, normal) = Axes(volume.Affine);
        var centre = CentrePoint(volume);
        double min = double.PositiveInfinity, max = double.NegativeInfinity;
        foreach (var corner in BoxCorners(volume))
        {
            double d = (corner - centre).Dot(normal);
            min = Math.Min(min, d);
            max = Math.Max(max, d);
        }
        return (min, max);
    }

    /// <summary>World position of the untilted plane's centre point (before the offset), see <see cref="Build"/>.</summary>
    public Vector3D CentrePoint(Volume volume)
    {
        var a = volume.Affine;
        var (_, _, baseNormal) = (this with { TiltAboutHorizontalDeg = 0, TiltAboutVerticalDeg = 0 }).Axes(a);
        double[] centre = [(volume.Nx - 1) / 2.0, (volume.Ny - 1) / 2.0, (volume.Nz - 1) / 2.0];
        int[] counts = [volume.Nx, volume.Ny, volume.Nz];
        int closest = 0;
        double best = -1;
        for (int axis = 0; axis < 3; axis++)
        {
            double share = Math.Abs(PlaneOrientation.Column(a, axis).Normalized().Dot(baseNormal));
            if (share > best + 1e-9) { best = share; closest = axis; }
        }
        centre[closest] = counts[closest] / 2;
        return a.Apply(centre[0], centre[1], centre[2]);
    }

    public static double SmallestVoxelSize(Affine a)
    {
        var (si, sj, sk) = a.VoxelSizes;
        return Math.Min(si, Math.Min(sj, sk));
    }

    /// <summary>World positions of the eight outer corners of the volume's voxel cells (indices −0.5 and n − 0.5).</summary>
    public static IEnumerable<Vector3D> BoxCorners(Volume volume)
    {
        foreach (double k in new[] { -0.5, volume.Nz - 0.5 })
        foreach (double j in new[] { -0.5, volume.Ny - 0.5 })
        foreach (double i in new[] { -0.5, volume.Nx - 0.5 })
            yield return volume.Affine.Apply(i, j, k);
    }

    private static (double Right, double Down) HalfExtents(Volume volume, Vector3D centre, Vector3D right, Vector3D down)
    {
        double hr = 0, hd = 0;
        foreach (var corner in BoxCorners(volume))
        {
            hr = Math.Max(hr, Math.Abs((corner - centre).Dot(right)));
            hd = Math.Max(hd, Math.Abs((corner - centre).Dot(down)));
        }
        return (hr, hd);
    }

    // The pixel count whose cells span 2·half (an axis-aligned plane at voxel size gets exactly n pixels).
    private static int CoveringCount(double half, double pixel)
    {
        double n = Math.Ceiling(2 * half / pixel - 1e-6);
        return (int)Math.Clamp(n, 1, int.MaxValue / 2);
    }

    private void Check(string? source)
    {
        CheckTilt(source, "tilt about the horizontal axis", TiltAboutHorizontalDeg);
        CheckTilt(source, "tilt about the vertical axis", TiltAboutVerticalDeg);
        if (!double.IsFinite(OffsetMm))
            throw new InputProblemException(source, "the offset must be a finite number of millimetres", "give a number such as 1.5");
        if (PixelSizeMm is { } p && !(p > 0 && double.IsFinite(p)))
            throw new InputProblemException(source, $"the pixel size must be a positive number of millimetres, not {p}", "give a value such as 0.05");
        if (Width is { } w && (w < 1 || w > ReslicePlane.MaxPixels) || Height is { } h && (h < 1 || h > ReslicePlane.MaxPixels))
            throw new InputProblemException(source, $"the output size must be 1 to {ReslicePlane.MaxPixels} pixels a side",
                "give a size such as 512 or 640x480");
    }

    private static void CheckTilt(string? source, string what, double degrees)
    {
        if (!double.IsFinite(degrees) || Math.Abs(degrees) > MaxTiltDeg)
            throw new InputProblemException(source, $"the {what} must be between −{MaxTiltDeg} and {MaxTiltDeg} degrees, not {degrees}",
                "give an angle in that range");
    }
}
