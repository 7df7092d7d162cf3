using StackBuild.Imaging;

namespace StackBuild.Reslice;

public enum Interpolation
{
    /// <summary>Trilinear: a weighted mean of the eight surrounding voxel centres (intensity volumes).</summary>
    Linear,
    /// <summary>The value of the voxel the point falls in (label volumes, where means make no sense).</summary>
    Nearest,
}

/// <param name="Interpolation">How to sample between voxel centres.</param>
/// <param name="Fill">Value for pixels that fall outside the volume.</param>
/// <param name="MaxThreads">Rows are shared among this many threads (1 = run on the calling thread only;
/// 0 = as many as the machine has cores).</param>
public sealed record ResliceOptions(Interpolation Interpolation = Interpolation.Linear, float Fill = 0f, int MaxThreads = 1)
{
    public static ResliceOptions Default { get; } = new();
}

/// <summary>Samples a volume on an arbitrary plane (common practice: trilinear or nearest-neighbour resampling).</summary>
public static class Reslicer
{
    /// <summary>
    /// The plane's pixels sampled from <paramref name="volume"/>. A pixel lies inside the volume when its voxel
    /// position is within the voxel cells, i.e. each index in [−0.5, n − 0.5]; in the outer half voxel the
    /// nearest voxel centre's value is extended (as <see cref="GrayImage.SampleBilinear"/> does). Outside, the
    /// pixel is <see cref="ResliceOptions.Fill"/>.
    /// </summary>
    public static GrayImage Reslice(Volume volume, ReslicePlane plane, ResliceOptions? options = null) =>
        Reslice(ResliceSource.Direct(volume), plane, options);

    /// <summary>As <see cref="Reslice(Volume, ReslicePlane, ResliceOptions?)"/>, from a prepared source (faster when repeated).</summary>
    public static GrayImage Reslice(ResliceSource source, ReslicePlane plane, ResliceOptions? options = null)
    {
        var image = new GrayImage(plane.Width, plane.Height);
        ResliceInto(source, plane, image, options);
        return image;
    }

    /// <summary>As <see cref="Reslice(ResliceSource, ReslicePlane, ResliceOptions?)"/>, into an image of the plane's size (reuse it to avoid allocation).</summary>
    public static void ResliceInto(ResliceSource source, ReslicePlane plane, GrayImage target, ResliceOptions? options = null)
    {
        if (target.Width != plane.Width || target.Height != plane.Height)
            throw new ArgumentException($"The target image is {target.Width}×{target.Height} but the plane is {plane.Width}×{plane.Height}.");
        var o = options ?? ResliceOptions.Default;
        var steps = Steps.Of(source.Volume, plane);
        int threads = o.MaxThreads <= 0 ? Environment.ProcessorCount : o.MaxThreads;
        if (threads == 1 || plane.Height < 2 * TileRows)
        {
            RunRows(source, steps, target, o, 0, plane.Height);
            return;
        }
        // Whole bands of tile rows per task, so each thread walks a compact part of the volume.
        int bands = (plane.Height + TileRows - 1) / TileRows;
        Parallel.For(0, bands, new ParallelOptions { MaxDegreeOfParallelism = threads },
            b => RunRows(source, steps, target, o, b * TileRows, Math.Min(plane.Height, (b + 1) * TileRows)));
    }

    /// <summary>Voxel position of pixel (0, 0) and the voxel steps per pixel right and per pixel down.</summary>
    internal readonly record struct Steps(Vector3D Origin, Vector3D PerX, Vector3D PerY)
    {
        public static Steps Of(Volume volume, ReslicePlane plane)
        {
            var toVoxel = volume.Affine.Inverse();
            var w0 = plane.PixelToWorld(0, 0);
            var w1 = plane.PixelToWorld(1, 0);
            var w2 = plane.PixelToWorld(0, 1);
            Vector3D o = toVoxel.Apply(w0.X, w0.Y, w0.Z);
            Vector3D px = toVoxel.Apply(w1.X, w1.Y, w1.Z);
            Vector3D py = toVoxel.Apply(w2.X, w2.Y, w2.Z);
            return new Steps(o, px - o, py - o);
        }
    }

    // Pixels are visited in tiles (a band of rows, a run of columns at a time) rather than whole rows: a tile
    // covers a compact patch of the volume, so the voxels it reads are still in cache for its next row. Whole
    // rows of an oblique plane cross hundreds of sections, and are evicted before the next row comes back.
    private const int TileRows = 32, TileColumns = 64;

    private static unsafe void RunRows(ResliceSource source, Steps steps, GrayImage target, ResliceOptions options, int yStart, int yEnd)
    {
        var volume = source.Volume;
        var grid = new Grid(volume.Nx, volume.Ny, volume.Nz);
        switch (source.Storage)
        {
            case VoxelStorage.Byte:
                fixed (byte* p = source.Bytes) RunTiles(new ByteVoxels(p), grid, steps, target, options, yStart, yEnd);
                break;
            case VoxelStorage.UInt16:
                fixed (ushort* p = source.UInt16s) RunTiles(new UInt16Voxels(p), grid, steps, target, options, yStart, yEnd);
                break;
            case VoxelStorage.Int16:
                fixed (short* p = source.Int16s) RunTiles(new Int16Voxels(p), grid, steps, target, options, yStart, yEnd);
                break;
            default:
                fixed (float* p = volume.Voxels) RunTiles(new FloatVoxels(p), grid, steps, target, options, yStart, yEnd);
                break;
        }
    }

    private readonly record struct Grid(int Nx, int Ny, int Nz);

    // One loop body for each storage type: the JIT compiles a separate copy per struct, with the read inlined.
    private interface IVoxels { float this[int index] { get; } }
    private readonly unsafe struct FloatVoxels(float* p) : IVoxels { public float this[int index] => p[index]; }
    private readonly unsafe struct ByteVoxels(byte* p) : IVoxels { public float this[int index] => p[index]; }
    private readonly unsafe struct UInt16Voxels(ushort* p) : IVoxels { public float this[int index] => p[index]; }
    private readonly unsafe struct Int16Voxels(short* p) : IVoxels { public float this[int index] => p[index]; }

    private static unsafe void RunTiles<T>(T voxels, Grid grid, Steps steps, GrayImage target, ResliceOptions options, int yStart, int yEnd)
        where T : struct, IVoxels
    {
        int width = target.Width;
        float fill = options.Fill;
        bool nearest = options.Interpolation == Interpolation.Nearest;
        Span<int> first = stackalloc int[TileRows];
        Span<int> last = stackalloc int[TileRows];
        fixed (float* pixels = target.Pixels)
        {
            for (int band = yStart; band < yEnd; band += TileRows)
            {
                int rows = Math.Min(TileRows, yEnd - band);
                for (int r = 0; r < rows; r++)
                {
                    int y = band + r;
                    var (x0, x1) = InsideRange(steps.Origin + y * steps.PerY, steps.PerX, grid.Nx, grid.Ny, grid.Nz, width);
                    float* row = pixels + (long)y * width;
                    for (int x = 0; x < Math.Min(x0, width); x++) row[x] = fill;
                    for (int x = Math.Max(x1 + 1, 0); x < width; x++) row[x] = fill;
                    first[r] = x0;
                    last[r] = x1;
                }
                for (int column = 0; column < width; column += TileColumns)
                for (int r = 0; r < rows; r++)
                {
                    int x0 = Math.Max(first[r], column), x1 = Math.Min(last[r], column + TileColumns - 1);
                    if (x0 > x1) continue;
                    int y = band + r;
                    var start = steps.Origin + y * steps.PerY;
                    float* row = pixels + (long)y * width;
                    if (nearest) NearestRun(voxels, grid, start, steps.PerX, row, x0, x1);
                    else LinearRun(voxels, grid, start, steps.PerX, row, x0, x1);
                }
            }
        }
    }

    /// <summary>
    /// The first and last x in [0, width) whose voxel position lies within [−0.5, n − 0.5] on every axis
    /// (x0 > x1 when none does). Solved per axis from the straight line start + x·step, so the inner loops
    /// need no bounds tests.
    /// </summary>
    internal static (int X0, int X1) InsideRange(Vector3D start, Vector3D step, int nx, int ny, int nz, int width)
    {
        double lo = 0, hi = width - 1;
        Limit(start.X, step.X, nx, ref lo, ref hi);
        Limit(start.Y, step.Y, ny, ref lo, ref hi);
        Limit(start.Z, step.Z, nz, ref lo, ref hi);
        if (!(lo <= hi)) return (1, 0);
        return ((int)Math.Ceiling(lo), (int)Math.Floor(hi));
    }

    private static void Limit(double s, double d, int n, ref double lo, ref double hi)
    {
        double min = -0.5, max = n - 0.5;
        if (Math.Abs(d) < 1e-12)
        {
            if (s < min || s > max) { lo = 1; hi = 0; }
            return;
        }
        double t1 = (min - s) / d, t2 = (max - s) / d;
        lo = Math.Max(lo, Math.Min(t1, t2));
        hi = Math.Min(hi, Math.Max(t1, t2));
    }

    private static unsafe void LinearRun<T>(T v, Grid g, Vector3D s, Vector3D d, float* row, int x0, int x1) where T : struct, IVoxels
    {
        // Offsets to the next voxel along each axis; 0 on an axis of length 1 (the value is then constant along it).
        int si = g.Nx > 1 ? 1 : 0, sj = g.Ny > 1 ? g.Nx : 0, sk = g.Nz > 1 ? g.Nx * g.Ny : 0;
        int maxI = Math.Max(g.Nx - 2, 0), maxJ = Math.Max(g.Ny - 2, 0), maxK = Math.Max(g.Nz - 2, 0);
        double hiI = g.Nx - 1, hiJ = g.Ny - 1, hiK = g.Nz - 1;
        int nx = g.Nx, plane = g.Nx * g.Ny;
        for (int x = x0; x <= x1; x++)
        {
            double fi = Math.Clamp(s.X + x * d.X, 0, hiI);
            double fj = Math.Clamp(s.Y + x * d.Y, 0, hiJ);
            double fk = Math.Clamp(s.Z + x * d.Z, 0, hiK);
            int i = Math.Min((int)fi, maxI), j = Math.Min((int)fj, maxJ), k = Math.Min((int)fk, maxK);
            float ti = (float)(fi - i), tj = (float)(fj - j), tk = (float)(fk - k);
            int p = k * plane + j * nx + i;
            float v000 = v[p], v100 = v[p + si], v010 = v[p + sj], v110 = v[p + sj + si];
            float v001 = v[p + sk], v101 = v[p + sk + si], v011 = v[p + sk + sj], v111 = v[p + sk + sj + si];
            float c00 = v000 + ti * (v100 - v000);
            float c10 = v010 + ti * (v110 - v010);
            float c01 = v001 + ti * (v101 - v001);
            float c11 = v011 + ti * (v111 - v011);
            float c0 = c00 + tj * (c10 - c00);
            float c1 = c01 + tj * (c11 - c01);
            row[x] = c0 + tk * (c1 - c0);
        }
    }

    private static unsafe void NearestRun<T>(T v, Grid g, Vector3D s, Vector3D d, float* row, int x0, int x1) where T : struct, IVoxels
    {
        double hiI = g.Nx - 1, hiJ = g.Ny - 1, hiK = g.Nz - 1;
        int nx = g.Nx, plane = g.Nx * g.Ny;
        for (int x = x0; x <= x1; x++)
        {
            // Round half up; clamping first keeps the index inside at the far edge (n − 0.5).
            int i = (int)(Math.Clamp(s.X + x * d.X, 0, hiI) + 0.5);
            int j = (int)(Math.Clamp(s.Y + x * d.Y, 0, hiJ) + 0.5);
            int k = (int)(Math.Clamp(s.Z + x * d.Z, 0, hiK) + 0.5);
            row[x] = v[k * plane + j * nx + i];
        }
    }
}
