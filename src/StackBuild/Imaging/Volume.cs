using StackBuild.Geometry;

namespace StackBuild.Imaging;

/// <summary>
/// A 3D scalar volume of 32-bit floats with its geometry. Index order is NIfTI's: i fastest, then j, then k
/// (for a series: image x, image y, section). <see cref="Affine"/> maps (i, j, k) to RAS+ mm.
/// </summary>
public sealed class Volume
{
    /// <summary>Most planes an output volume may have (far beyond any real series).</summary>
    public const int MaxPlanes = 100_000;

    public int Nx { get; }
    public int Ny { get; }
    public int Nz { get; }
    public float[] Voxels { get; }
    public Affine Affine { get; set; }

    public Volume(int nx, int ny, int nz, Affine affine, float[]? voxels = null)
    {
        if (nx <= 0 || ny <= 0 || nz <= 0) throw new ArgumentOutOfRangeException(nameof(nx), "A volume needs positive dimensions.");
        Nx = nx; Ny = ny; Nz = nz;
        Affine = affine;
        long n = (long)nx * ny * nz;
        if (n > Array.MaxLength) throw new ArgumentOutOfRangeException(nameof(nx), $"A volume of {nx}×{ny}×{nz} voxels is too large to hold in memory.");
        Voxels = voxels ?? new float[n];
        if (Voxels.LongLength != n) throw new ArgumentException("Voxel count does not match the dimensions.");
    }

    public float this[int i, int j, int k]
    {
        get => Voxels[((long)k * Ny + j) * Nx + i];
        set => Voxels[((long)k * Ny + j) * Nx + i] = value;
    }

    public Span<float> Plane(int k) => Voxels.AsSpan(k * Nx * Ny, Nx * Ny);
}
