namespace StackBuild.Zarr;

/// <summary>
/// One resolution level of an OME-Zarr pyramid. Shapes and chunks are in the stored arrays' order (z, y, x), which is NIfTI's
/// (k, j, i): x fastest. <c>Factor</c> is the level's voxel size over level 0's along each axis (a power of two).
/// </summary>
public sealed record OmeZarrLevel(int Nz, int Ny, int Nx, int FactorZ, int FactorY, int FactorX, int ChunkZ, int ChunkY, int ChunkX)
{
    /// <summary>Chunks along z, y and x (the last chunk along an axis may reach past the array's edge, as Zarr v2 stores it).</summary>
    public (int Z, int Y, int X) ChunkCounts => (Ceiling(Nz, ChunkZ), Ceiling(Ny, ChunkY), Ceiling(Nx, ChunkX));

    private static int Ceiling(int n, int d) => (n + d - 1) / d;
}

/// <summary>
/// The levels of an OME-Zarr pyramid for a volume: level 0 is the volume; each further level averages blocks of 2 voxels
/// along the axes it halves. An axis is halved while its voxel is finer than twice the level's finest voxel (and it has at
/// least 2 voxels), so an anisotropic volume (the demo: 20 × 20 µm in the plane, 50 µm between planes) is first coarsened in
/// the plane only and the levels approach cubic voxels: 50/20/20 → 50/40/40 → 100/80/80 (axes of one voxel are left out of
/// "finest"). Levels are added while the larger
/// side of the last level's plane exceeds <see cref="SmallestPlaneSide"/> voxels.
/// </summary>
/// <remarks>
/// Halving towards cubic voxels is common practice for anisotropic microscopy pyramids (stated from memory, not from a
/// specification: OME-NGFF 0.4 leaves the downscaling to the writer and only asks that it be described). An axis with an odd
/// number of voxels gets ⌈n/2⌉ at the next level; its last block holds one voxel and is averaged over that one.
/// </remarks>
public sealed record OmeZarrLayout(IReadOnlyList<OmeZarrLevel> Levels, double VoxelZUm, double VoxelYUm, double VoxelXUm)
{
    /// <summary>Chunk shape (z, y, x) of every level, cut to the level's own size where it is smaller.</summary>
    public const int ChunkPlanes = 16, ChunkSide = 256;

    /// <summary>No further level once the larger side of a level's plane is at most this many voxels.</summary>
    public const int SmallestPlaneSide = 64;

    /// <summary>The pyramid for a volume of <paramref name="nx"/> × <paramref name="ny"/> × <paramref name="nz"/> voxels of the given sizes (µm).</summary>
    public static OmeZarrLayout For(int nx, int ny, int nz, double voxelXUm, double voxelYUm, double voxelZUm)
    {
        if (nx <= 0 || ny <= 0 || nz <= 0) throw new ArgumentOutOfRangeException(nameof(nx), "A volume needs positive dimensions.");
        if (!(voxelXUm > 0 && voxelYUm > 0 && voxelZUm > 0) || !double.IsFinite(voxelXUm + voxelYUm + voxelZUm))
            throw new ArgumentOutOfRangeException(nameof(voxelXUm), "Voxel sizes must be positive and finite.");
        var levels = new List<OmeZarrLevel> { Level(nz, ny, nx, 1, 1, 1) };
        while (true)
        {
            var last = levels[^1];
            if (Math.Max(last.Nx, last.Ny) <= SmallestPlaneSide) break;
            double sz = voxelZUm * last.FactorZ, sy = voxelYUm * last.FactorY, sx = voxelXUm * last.FactorX;
            // An axis of one voxel cannot be halved, so its size does not hold the others back (a single plane).
            double finest = Math.Min(last.Nz >= 2 ? sz : double.PositiveInfinity,
                Math.Min(last.Ny >= 2 ? sy : double.PositiveInfinity, last.Nx >= 2 ? sx : double.PositiveInfinity));
            bool hz = Halves(last.Nz, sz, finest), hy = Halves(last.Ny, sy, finest), hx = Halves(last.Nx, sx, finest);
            if (!hz && !hy && !hx) break;
            levels.Add(Level(hz ? Half(last.Nz) : last.Nz, hy ? Half(last.Ny) : last.Ny, hx ? Half(last.Nx) : last.Nx,
                last.FactorZ * (hz ? 2 : 1), last.FactorY * (hy ? 2 : 1), last.FactorX * (hx ? 2 : 1)));
        }
        return new OmeZarrLayout(levels, voxelZUm, voxelYUm, voxelXUm);

        static bool Halves(int n, double size, double finest) => n >= 2 && size < 2 * finest * (1 - 1e-9);
        static int Half(int n) => (n + 1) / 2;
        static OmeZarrLevel Level(int nz, int ny, int nx, int fz, int fy, int fx) =>
            new(nz, ny, nx, fz, fy, fx, Math.Min(ChunkPlanes, nz), Math.Min(ChunkSide, ny), Math.Min(ChunkSide, nx));
    }

    /// <summary>
    /// The level's OME-NGFF scale (z, y, x; µm): its voxel size. Level 0 is the volume's voxel size.
    /// </summary>
    public double[] Scale(OmeZarrLevel level) => [VoxelZUm * level.FactorZ, VoxelYUm * level.FactorY, VoxelXUm * level.FactorX];

    /// <summary>
    /// The level's OME-NGFF translation (z, y, x; µm), applied after the scale: where its voxel 0 lies in level 0's coordinates.
    /// Voxel 0 of a level averages level-0 voxels 0 … f − 1 along an axis halved to factor f, so its centre lies at
    /// (f − 1) / 2 level-0 voxels; level 0's voxel 0 is at 0 (NIfTI puts voxel centres at whole indices).
    /// </summary>
    public double[] Translation(OmeZarrLevel level) =>
        [VoxelZUm * (level.FactorZ - 1) / 2.0, VoxelYUm * (level.FactorY - 1) / 2.0, VoxelXUm * (level.FactorX - 1) / 2.0];
}
