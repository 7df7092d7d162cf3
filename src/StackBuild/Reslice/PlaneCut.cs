using StackBuild.Imaging;

namespace StackBuild.Reslice;

/// <summary>Where a plane cuts the volume's box of voxel cells: for outline drawings.</summary>
public static class PlaneCut
{
    /// <summary>
    /// The polygon (3 to 6 points, in order around it) where the infinite plane through
    /// <see cref="ReslicePlane.Centre"/> with <see cref="ReslicePlane.Normal"/> meets the box spanned by the voxel
    /// cells (indices −0.5 to n − 0.5), in voxel indices. Empty when the plane misses the box.
    /// </summary>
    public static IReadOnlyList<Vector3D> VoxelPolygon(Volume volume, ReslicePlane plane)
    {
        var toVoxel = volume.Affine.Inverse();
        var c = plane.Centre;
        Vector3D centre = toVoxel.Apply(c.X, c.Y, c.Z);
        // The normal in voxel space is the world normal pulled back through the affine's linear part (Aᵀ·n).
        var n = plane.Normal;
        var a = volume.Affine;
        var normal = new Vector3D(
            a[0, 0] * n.X + a[1, 0] * n.Y + a[2, 0] * n.Z,
            a[0, 1] * n.X + a[1, 1] * n.Y + a[2, 1] * n.Z,
            a[0, 2] * n.X + a[1, 2] * n.Y + a[2, 2] * n.Z);
        double[] lo = [-0.5, -0.5, -0.5], hi = [volume.Nx - 0.5, volume.Ny - 0.5, volume.Nz - 0.5];
        var points = new List<Vector3D>();
        // The 12 box edges: along each axis, from each of the 4 corners of the face at its low end.
        for (int axis = 0; axis < 3; axis++)
        for (int corner = 0; corner < 4; corner++)
        {
            var from = new double[3];
            int other1 = (axis + 1) % 3, other2 = (axis + 2) % 3;
            from[axis] = lo[axis];
            from[other1] = (corner & 1) == 0 ? lo[other1] : hi[other1];
            from[other2] = (corner & 2) == 0 ? lo[other2] : hi[other2];
            var to = (double[])from.Clone();
            to[axis] = hi[axis];
            var p = from.AsVector();
            var q = to.AsVector();
            double dp = (p - centre).Dot(normal), dq = (q - centre).Dot(normal);
            if (dp == dq || Math.Sign(dp) == Math.Sign(dq) && dp != 0) continue;
            double t = dp / (dp - dq);
            var hit = p + t * (q - p);
            if (!points.Any(x => (x - hit).Length < 1e-9)) points.Add(hit);
        }
        if (points.Count < 3) return [];
        // Order the points by angle about their mean, measured in two directions within the plane.
        var mean = (1.0 / points.Count) * points.Aggregate(Vector3D.Zero, (s, x) => s + x);
        var e1 = (points[0] - mean).Normalized();
        var e2 = normal.Normalized().Cross(e1);
        return points.OrderBy(x => Math.Atan2((x - mean).Dot(e2), (x - mean).Dot(e1))).ToArray();
    }
}
