using StackBuild.Geometry;

namespace StackBuild.Reslice;

/// <summary>
/// An untilted starting plane: which way the output image's right (+x) and down (+y) point.
/// Either two voxel axes of the volume (<c>ij</c> = <c>section</c>, <c>ik</c>, <c>jk</c>, or their reverses),
/// so the plane follows the volume's own grid, or two anatomical letters in world space (<c>RI</c>: image right
/// towards the specimen's Right, image down towards Inferior), with three named shortcuts:
/// <c>axial</c> = RP, <c>coronal</c> = RI, <c>sagittal</c> = AI (RAS+ letters as in <see cref="AxisCodes"/>).
/// </summary>
public sealed record PlaneOrientation
{
    /// <summary>The canonical spelling (<c>section</c>, <c>ik</c>, <c>jk</c>, …, or two anatomical letters).</summary>
    public string Name { get; }

    // Voxel axes (0 = i, 1 = j, 2 = k) for right and down, or -1 when the plane is given by world letters.
    private readonly int _rightAxis, _downAxis;
    private readonly char _rightLetter, _downLetter;

    private PlaneOrientation(string name, int rightAxis, int downAxis, char rightLetter, char downLetter)
    {
        Name = name;
        _rightAxis = rightAxis;
        _downAxis = downAxis;
        _rightLetter = rightLetter;
        _downLetter = downLetter;
    }

    /// <summary>The plane of a section: image right along i, down along j.</summary>
    public static PlaneOrientation Section { get; } = new("section", 0, 1, ' ', ' ');

    /// <summary>True when the plane follows two voxel axes (rather than world letters).</summary>
    public bool FollowsVoxelAxes => _rightAxis >= 0;

    /// <summary>The voxel axis the untilted plane is normal to (0 = i, 1 = j, 2 = k), or null for world letters.</summary>
    public int? NormalAxis => FollowsVoxelAxes ? 3 - _rightAxis - _downAxis : null;

    public const string Accepted =
        "section (= ij), ik, jk, ji, ki, kj, axial, coronal, sagittal, or two anatomical letters such as RI";

    public static bool TryParse(string? text, out PlaneOrientation orientation, out string problem)
    {
        orientation = Section;
        problem = "";
        var t = (text ?? "").Trim();
        switch (t.ToLowerInvariant())
        {
            case "section": case "ij": return true;
            case "axial": return TryParse("RP", out orientation, out problem);
            case "coronal": return TryParse("RI", out orientation, out problem);
            case "sagittal": return TryParse("AI", out orientation, out problem);
        }
        if (t.Length == 2 && "ijk".Contains(t[0]) && "ijk".Contains(t[1]) && t[0] != t[1])
        {
            orientation = new PlaneOrientation(t, t[0] - 'i', t[1] - 'i', ' ', ' ');
            return true;
        }
        var upper = t.ToUpperInvariant();
        if (upper.Length == 2 && "RLAPSI".Contains(upper[0]) && "RLAPSI".Contains(upper[1]))
        {
            if (WorldAxis(upper[0]) == WorldAxis(upper[1]))
            {
                problem = $"plane '{t}' names the same body axis twice; use two of R/L, A/P, S/I (for example RI)";
                return false;
            }
            orientation = new PlaneOrientation(upper, -1, -1, upper[0], upper[1]);
            return true;
        }
        problem = $"'{Shorten(t)}' is not a plane orientation; use {Accepted}";
        return false;
    }

    public static PlaneOrientation Parse(string text) =>
        TryParse(text, out var o, out var problem) ? o : throw new FormatException(problem);

    public override string ToString() => Name;

    /// <summary>
    /// World unit vectors for image right and down. For voxel axes on a sheared affine, down is made
    /// perpendicular to right (Gram–Schmidt) so the pixels stay square.
    /// </summary>
    public (Vector3D Right, Vector3D Down) Directions(Affine voxelToWorld)
    {
        Vector3D right, down;
        if (FollowsVoxelAxes)
        {
            right = Column(voxelToWorld, _rightAxis).Normalized();
            down = Column(voxelToWorld, _downAxis);
        }
        else
        {
            right = AxisCodes.UnitVector(_rightLetter).AsVector();
            down = AxisCodes.UnitVector(_downLetter).AsVector();
        }
        down = (down - down.Dot(right) * right).Normalized();
        return (right, down);
    }

    /// <summary>World direction of voxel axis <paramref name="axis"/> (0 = i, 1 = j, 2 = k), in mm per voxel.</summary>
    internal static Vector3D Column(Affine a, int axis) => new(a[0, axis], a[1, axis], a[2, axis]);

    private static int WorldAxis(char letter) => letter switch { 'R' or 'L' => 0, 'A' or 'P' => 1, _ => 2 };

    internal static string Shorten(string text) => text.Length <= 40 ? text : text[..40] + "…";
}

internal static class ArrayVectorExtensions
{
    public static Vector3D AsVector(this double[] a) => new(a[0], a[1], a[2]);
}
