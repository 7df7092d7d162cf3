namespace StackBuild.Geometry;

/// <summary>
/// A 2D affine map of the plane, held as the top two rows of a 3×3 homogeneous matrix:
/// <c>x' = M00·x + M01·y + M02</c>, <c>y' = M10·x + M11·y + M12</c>.
/// </summary>
/// <remarks>
/// StackBuild's one pixel convention: x runs to the right, y runs down, and (0, 0) is the centre of the
/// top-left pixel. Rigid maps (rotation, shift, optional mirror) and the scale between working size and
/// full resolution are all expressed with this type; composition and inversion live only here.
/// A positive rotation angle turns +x towards +y, which on screen (y down) is clockwise.
/// </remarks>
public readonly record struct Transform2D(double M00, double M01, double M02, double M10, double M11, double M12)
{
    public static Transform2D Identity => new(1, 0, 0, 0, 1, 0);

    public static Transform2D Translation(double dx, double dy) => new(1, 0, dx, 0, 1, dy);

    public static Transform2D Scale(double s) => new(s, 0, 0, 0, s, 0);

    public static Transform2D Scale(double sx, double sy) => new(sx, 0, 0, 0, sy, 0);

    /// <summary>Rotation by <paramref name="degrees"/> about the point (cx, cy).</summary>
    public static Transform2D Rotation(double degrees, double cx = 0, double cy = 0)
    {
        double a = degrees * Math.PI / 180.0, c = Math.Cos(a), s = Math.Sin(a);
        // p' = R (p - c) + c
        return new(c, -s, cx - c * cx + s * cy, s, c, cy - s * cx - c * cy);
    }

    /// <summary>Mirror left-right about the vertical line x = <paramref name="cx"/>.</summary>
    public static Transform2D MirrorX(double cx = 0) => new(-1, 0, 2 * cx, 0, 1, 0);

    /// <summary>
    /// A rigid map: optional mirror about x = 0, then rotation by <paramref name="degrees"/> about the
    /// origin, then a shift by (dx, dy).
    /// </summary>
    public static Transform2D Rigid(double degrees, double dx, double dy, bool mirrored = false)
    {
        var m = mirrored ? MirrorX() : Identity;
        return m.Then(Rotation(degrees)).Then(Translation(dx, dy));
    }

    /// <summary>The map that applies this one first and <paramref name="next"/> after it.</summary>
    public Transform2D Then(Transform2D next) => new(
        next.M00 * M00 + next.M01 * M10,
        next.M00 * M01 + next.M01 * M11,
        next.M00 * M02 + next.M01 * M12 + next.M02,
        next.M10 * M00 + next.M11 * M10,
        next.M10 * M01 + next.M11 * M11,
        next.M10 * M02 + next.M11 * M12 + next.M12);

    public double Determinant => M00 * M11 - M01 * M10;

    /// <summary>True when the map reverses handedness (a section mounted face down).</summary>
    public bool IsMirrored => Determinant < 0;

    /// <summary>Rotation angle in degrees, in (-180, 180], of the rotational part after removing any mirror about x.</summary>
    public double RotationDegrees
    {
        get
        {
            // With a mirror about x first, the first column is negated: undo it before reading the angle.
            double c = IsMirrored ? -M00 : M00, s = IsMirrored ? -M10 : M10;
            return Math.Atan2(s, c) * 180.0 / Math.PI;
        }
    }

    public Transform2D Inverse()
    {
        double det = Determinant;
        if (Math.Abs(det) < 1e-300) throw new InvalidOperationException("The transform is singular and has no inverse.");
        double i00 = M11 / det, i01 = -M01 / det, i10 = -M10 / det, i11 = M00 / det;
        return new(i00, i01, -(i00 * M02 + i01 * M12), i10, i11, -(i10 * M02 + i11 * M12));
    }

    public (double X, double Y) Apply(double x, double y) => (M00 * x + M01 * y + M02, M10 * x + M11 * y + M12);

    /// <summary>Row-major 3×3 matrix, for sidecars.</summary>
    public double[][] ToRows() => [[M00, M01, M02], [M10, M11, M12], [0, 0, 1]];

    public static Transform2D FromRows(double[][] rows)
    {
        if (rows.Length < 2 || rows[0].Length != 3 || rows[1].Length != 3)
            throw new ArgumentException("A 2D transform needs a 3×3 (or 2×3) matrix given as rows.");
        return new(rows[0][0], rows[0][1], rows[0][2], rows[1][0], rows[1][1], rows[1][2]);
    }

    public bool ApproximatelyEquals(Transform2D o, double tolerance) =>
        Math.Abs(M00 - o.M00) <= tolerance && Math.Abs(M01 - o.M01) <= tolerance && Math.Abs(M02 - o.M02) <= tolerance &&
        Math.Abs(M10 - o.M10) <= tolerance && Math.Abs(M11 - o.M11) <= tolerance && Math.Abs(M12 - o.M12) <= tolerance;
}
