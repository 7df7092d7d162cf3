using StackBuild.Geometry;

namespace StackBuild.Reslice;

/// <summary>
/// A flat grid of pixels placed anywhere in world space: the output of one reslice.
/// Pixel (x, y) follows StackBuild's image convention (x right, y down, (0, 0) at the centre of the top-left
/// pixel) and sits at <c>Centre + (x − (Width−1)/2)·PixelSizeMm·Right + (y − (Height−1)/2)·PixelSizeMm·Down</c>
/// in RAS+ millimetres. <see cref="Right"/> and <see cref="Down"/> are orthonormal; the plane's normal is
/// <c>Right × Down</c>, which with y down points away from the viewer.
/// </summary>
public sealed record ReslicePlane
{
    /// <summary>Largest width or height accepted, in pixels (a 8192² float plane is 256 MB).</summary>
    public const int MaxPixels = 8192;

    public Vector3D Centre { get; }
    public Vector3D Right { get; }
    public Vector3D Down { get; }
    public int Width { get; }
    public int Height { get; }
    public double PixelSizeMm { get; }

    public ReslicePlane(Vector3D centre, Vector3D right, Vector3D down, int width, int height, double pixelSizeMm)
    {
        if (!double.IsFinite(centre.X) || !double.IsFinite(centre.Y) || !double.IsFinite(centre.Z))
            throw new ArgumentException("The plane centre must be a finite point.", nameof(centre));
        if (Math.Abs(right.Length - 1) > 1e-6 || Math.Abs(down.Length - 1) > 1e-6)
            throw new ArgumentException("The plane's right and down directions must be unit vectors.");
        if (Math.Abs(right.Dot(down)) > 1e-6)
            throw new ArgumentException("The plane's right and down directions must be perpendicular.");
        if (width < 1 || height < 1 || width > MaxPixels || height > MaxPixels)
            throw new ArgumentOutOfRangeException(nameof(width), $"A plane must be 1 to {MaxPixels} pixels wide and high, not {width}×{height}.");
        if (!(pixelSizeMm > 0) || !double.IsFinite(pixelSizeMm))
            throw new ArgumentOutOfRangeException(nameof(pixelSizeMm), "The pixel size must be a positive number of millimetres.");
        Centre = centre;
        Right = right;
        Down = down;
        Width = width;
        Height = height;
        PixelSizeMm = pixelSizeMm;
    }

    /// <summary>Unit normal, <c>Right × Down</c> (away from the viewer).</summary>
    public Vector3D Normal => Right.Cross(Down);

    /// <summary>World position (mm) of the centre of pixel (x, y).</summary>
    public Vector3D PixelToWorld(double x, double y) =>
        Centre + ((x - (Width - 1) / 2.0) * PixelSizeMm) * Right + ((y - (Height - 1) / 2.0) * PixelSizeMm) * Down;

    /// <summary>
    /// The map from pixel (x, y) to world mm as rows of a 3×3 matrix [wx; wy; wz] = M · [x, y, 1]: column 0 is
    /// the world step per pixel to the right, column 1 per pixel down, column 2 the world position of pixel (0, 0).
    /// </summary>
    public double[][] PixelToWorldRows()
    {
        var o = PixelToWorld(0, 0);
        var r = PixelSizeMm * Right;
        var d = PixelSizeMm * Down;
        return [[r.X, d.X, o.X], [r.Y, d.Y, o.Y], [r.Z, d.Z, o.Z]];
    }

    /// <summary>
    /// The centres of the four corner pixels, clockwise from the top-left, in world mm and in voxel indices
    /// of the volume whose affine is given.
    /// </summary>
    public IReadOnlyList<PlaneCorner> Corners(Affine voxelToWorld)
    {
        var toVoxel = voxelToWorld.Inverse();
        (string Name, int X, int Y)[] at =
            [("top-left", 0, 0), ("top-right", Width - 1, 0), ("bottom-right", Width - 1, Height - 1), ("bottom-left", 0, Height - 1)];
        return at.Select(c =>
        {
            var w = PixelToWorld(c.X, c.Y);
            Vector3D v = toVoxel.Apply(w.X, w.Y, w.Z);
            return new PlaneCorner(c.Name, c.X, c.Y, w, v);
        }).ToArray();
    }
}

/// <summary>One corner pixel of a plane: its pixel coordinates, world position (mm) and voxel indices (i, j, k).</summary>
public sealed record PlaneCorner(string Name, int PixelX, int PixelY, Vector3D WorldMm, Vector3D Voxel);
