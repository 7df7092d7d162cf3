using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Render;

/// <summary>Resampling of a built volume along its plane axis (k) to another plane spacing.</summary>
public static class ZResampler
{
    /// <summary>
    /// The volume resampled along k to planes <paramref name="spacingMm"/> apart. The original spacing is the length of
    /// the affine's k column. Output plane m lies at original index z = m · spacingMm / original spacing; there are
    /// ⌊(Nz − 1) · original spacing / spacingMm⌋ + 1 planes, so none lies beyond the last original plane (no
    /// extrapolation). A plane that falls on an original plane (within 10⁻⁶ of a plane) is a copy of it; one between
    /// planes k and k + 1 is <see cref="GapFiller.Interpolate(ReadOnlySpan{float}, ReadOnlySpan{float}, int, int, double, GapFill)"/>
    /// of those two at t = z − k with <paramref name="method"/> (<see cref="GapFill.Linear"/>: linear along z;
    /// <see cref="GapFill.Flow"/>: registration-based); <see cref="GapFill.None"/> takes the nearest original plane.
    /// Geometry: the affine's k column is scaled by spacingMm / original spacing and its translation is kept, so plane
    /// 0 stays at the same world position and the i and j axes are unchanged. Resampling to the original spacing
    /// returns the same voxels. Refuses (<see cref="InputProblemException"/>, file "--voxel-size") a spacing that is
    /// not a finite positive number or that would give more than <see cref="Volume.MaxPlanes"/> planes.
    /// </summary>
    public static Volume ResampleZ(Volume volume, double spacingMm, GapFill method)
    {
        var (count, scale, affine) = Plan(volume.Nx, volume.Ny, volume.Nz, volume.Affine, spacingMm);
        var result = new Volume(volume.Nx, volume.Ny, count, affine);
        Parallel.For(0, count, m => PlaneAt(m, scale, volume.Nz, k => volume.Plane(k), result.Plane(m), volume.Nx, volume.Ny, method));
        return result;
    }

    /// <summary>
    /// The number of planes, the step in original planes between them and the affine of <see cref="ResampleZ"/>'s result
    /// for a volume of <paramref name="nz"/> planes with <paramref name="affine"/>, with its refusals; nothing is resampled.
    /// </summary>
    public static (int Count, double Scale, Affine Affine) Plan(int nx, int ny, int nz, Affine affine, double spacingMm)
    {
        const string option = "--voxel-size";
        if (!double.IsFinite(spacingMm) || spacingMm <= 0)
            throw new InputProblemException(option, $"the plane spacing {spacingMm * 1000} µm is not a positive number",
                "give the voxel size in µm as a number greater than 0, e.g. --voxel-size 50");
        double original = affine.VoxelSizes.K;
        if (!double.IsFinite(original) || original <= 0)
            throw new InputProblemException(option, "the volume's plane spacing (the affine's k column) is zero or not a number",
                "build the volume again without --voxel-size and check its sidecar");
        double last = (nz - 1) * original / spacingMm;
        if (!(last + 1 <= Volume.MaxPlanes))
            throw new InputProblemException(option,
                $"{spacingMm * 1000:0.###} µm between planes would give {Math.Floor(last + 1e-9) + 1:0} planes, more than {Volume.MaxPlanes}",
                $"give a voxel size of at least {(nz - 1) * original * 1000 / (Volume.MaxPlanes - 1):0.###} µm");
        int count = (int)Math.Floor(last + 1e-9) + 1;
        long plane = (long)nx * ny;
        if (plane * count > Array.MaxLength)
            throw new InputProblemException(option,
                $"{count} planes of {nx} × {ny} voxels are too many to hold in memory",
                "give a larger spacing or downsample the sections");

        double scale = spacingMm / original;
        var m = new double[3, 4];
        for (int r = 0; r < 3; r++)
        {
            m[r, 0] = affine[r, 0];
            m[r, 1] = affine[r, 1];
            m[r, 2] = affine[r, 2] * scale;
            m[r, 3] = affine[r, 3];
        }
        return (count, scale, new Affine(m));
    }

    /// <summary>The original planes output plane <paramref name="m"/> is made from: the one below (or at) it, and whether the next one is needed too.</summary>
    public static (int Below, bool NeedsNext) Sources(int m, double scale, int nz)
    {
        double z = m * scale;
        int below = Math.Min((int)Math.Floor(z + 1e-6), nz - 1);
        double t = z - below;
        return (below, !(below >= nz - 1 || Math.Abs(t) <= 1e-6));
    }

    /// <summary>Output plane <paramref name="m"/> of <see cref="ResampleZ"/> from the original planes <paramref name="plane"/> gives.</summary>
    public static void PlaneAt(int m, double scale, int nz, PlaneOf plane, Span<float> target, int nx, int ny, GapFill method)
    {
        double z = m * scale;
        int below = Math.Min((int)Math.Floor(z + 1e-6), nz - 1);
        double t = z - below;
        if (below >= nz - 1 || Math.Abs(t) <= 1e-6)
            plane(below).CopyTo(target);
        else if (t >= 1 - 1e-6)
            plane(below + 1).CopyTo(target);
        else if (method == GapFill.None)
            plane(t < 0.5 ? below : below + 1).CopyTo(target);
        else
            GapFiller.InterpolateInto(plane(below), plane(below + 1), nx, ny, t, method, target);
    }

    /// <summary>Original plane k's voxels.</summary>
    public delegate ReadOnlySpan<float> PlaneOf(int k);
}