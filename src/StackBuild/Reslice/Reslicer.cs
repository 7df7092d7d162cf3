using System.Runtime.Intrinsics.X86;
using StackBuild.Imaging;

namespace StackBuild.Reslice;

public enum ResliceSampling
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
public sealed record ResliceOptions(ResliceSampling Interpolation = ResliceSampling.Linear, float Fill = 0f, int MaxThreads = 1)
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

    // An oblique plane reads voxels from many sections whose cache lines no hardware prefetcher can guess; asking
    // for the lines of the pixel this many steps ahead keeps several loads from memory going at once.
    // (Measured on this project's benchmark, docs/benchmarks-reslice.md: about halves the time for oblique planes.)
    private const int PrefetchAhead = 8;

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

    /// <summary>The volume's size, and the offsets from a voxel to its neighbours (0 on an axis of length 1).</summary>
    private readonly record struct Grid(int Nx, int Ny, int Nz)
    {
        public int StepI => Nx > 1 ? 1 : 0;
        public int StepJ => Ny > 1 ? Nx : 0;
        public int StepK => Nz > 1 ? Nx * Ny : 0;
    }

    // One loop body for each storage type: the JIT compiles a separate copy per struct, with the read inlined.
    private interface IVoxels
    {
        float this[int index] { get; }
        /// <summary>Asks the processor to start loading a voxel's cache line (a hint: never faults, may be ignored).</summary>
        void Prefetch(int index);
    }

    private readonly unsafe struct FloatVoxels(float* p) : IVoxels
    {
        public float this[int index] => p[index];
        public void Prefetch(int index) { if (Sse.IsSupported) Sse.Prefetch0(p + index); }
    }

    private readonly unsafe struct ByteVoxels(byte* p) : IVoxels
    {
        public float this[int index] => p[index];
        public void Prefetch(int index) { if (Sse.IsSupported) Sse.Prefetch0(p + index); }
    }

    private readonly unsafe struct UInt16Voxels(ushort* p) : IVoxels
    {
        public float this[int index] => p[index];
        public void Prefetch(int index) { if (Sse.IsSupported) Sse.Prefetch0(p + index); }
    }

    private readonly unsafe struct Int16Voxels(short* p) : IVoxels
    {
        public float this[int index] => p[index];
        public void Prefetch(int index) { if (Sse.IsSupported) Sse.Prefetch0(p + index); }
    }

    // Compile-time switch for the loops: positions in the outer half voxel must be clamped onto the voxel
    // centres; positions inside the centres' hull need no clamping (most pixels).
    private interface IEdge { static abstract bool Clamp { get; } }
    private readonly struct AtEdge : IEdge { public static bool Clamp => true; }
    private readonly struct Inside : IEdge { public static bool Clamp => false; }

    private static unsafe void RunTiles<T>(T voxels, Grid grid, Steps steps, GrayImage target, ResliceOptions options, int yStart, int yEnd)
        where T : struct, IVoxels
    {
        int width = target.Width;
        float fill = options.Fill;
        bool nearest = options.Interpolation == ResliceSampling.Nearest;
        // Per row of the band: the pixels inside the voxel cells [first, last], and within them those inside the
        // hull of voxel centres [core0, core1].
        Span<int> first = stackalloc int[TileRows], last = stackalloc int[TileRows];
        Span<int> core0 = stackalloc int[TileRows], core1 = stackalloc int[TileRows];
        fixed (float* pixels = target.Pixels)
        {
            for (int band = yStart; band < yEnd; band += TileRows)
            {
                int rows = Math.Min(TileRows, yEnd - band);
                for (int r = 0; r < rows; r++)
                {
                    var start = steps.Origin + (band + r) * steps.PerY;
                    var (x0, x1) = InsideRange(start, steps.PerX, grid.Nx, grid.Ny, grid.Nz, width);
                    var (c0, c1) = InsideRange(start, steps.PerX, grid.Nx, grid.Ny, grid.Nz, width, margin: 0);
                    float* row = pixels + (long)(band + r) * width;
                    for (int x = 0; x < Math.Min(x0, width); x++) row[x] = fill;
                    for (int x = Math.Max(x1 + 1, 0); x < width; x++) row[x] = fill;
                    (first[r], last[r]) = (x0, x1);
                    // An empty core sits at the row's end so the clamped pieces below cover [x0, x1].
                    (core0[r], core1[r]) = c0 <= c1 ? (Math.Max(c0, x0), Math.Min(c1, x1)) : (x1 + 1, x1);
                }
                for (int column = 0; column < width; column += TileColumns)
                {
                    int columnEnd = column + TileColumns - 1;
                    for (int r = 0; r < rows; r++)
                    {
                        int x0 = Math.Max(first[r], column), x1 = Math.Min(last[r], columnEnd);
                        if (x0 > x1) continue;
                        var start = steps.Origin + (band + r) * steps.PerY;
                        float* row = pixels + (long)(band + r) * width;
                        int c0 = Math.Clamp(core0[r], x0, x1 + 1), c1 = Math.Clamp(core1[r], c0 - 1, x1);
                        if (nearest)
                        {
                            NearestRun<T, AtEdge>(voxels, grid, start, steps.PerX, row, x0, c0 - 1);
                            NearestRun<T, Inside>(voxels, grid, start, steps.PerX, row, c0, c1);
                            NearestRun<T, AtEdge>(voxels, grid, start, steps.PerX, row, c1 + 1, x1);
                        }
                        else
                        {
                            LinearRun<T, AtEdge>(voxels, grid, start, steps.PerX, row, x0, c0 - 1);
                            LinearRun<T, Inside>(voxels, grid, start, steps.PerX, row, c0, c1);
                            LinearRun<T, AtEdge>(voxels, grid, start, steps.PerX, row, c1 + 1, x1);
                        }
                    }
                }
            }
        }
    }

    /// <summary>
    /// The first and last x in [0, width) whose voxel position lies within [−margin, n − 1 + margin] on every
    /// axis (x0 > x1 when none does); margin 0.5 = inside the voxel cells, 0 = inside the hull of voxel centres.
    /// Solved per axis from the straight line start + x·step, so the inner loops need no bounds tests.
    /// </summary>
    internal static (int X0, int X1) InsideRange(Vector3D start, Vector3D step, int nx, int ny, int nz, int width, double margin = 0.5)
    {
        double lo = 0, hi = width - 1;
        Limit(start.X, step.X, nx, margin, ref lo, ref hi);
        Limit(start.Y, step.Y, ny, margin, ref lo, ref hi);
        Limit(start.Z, step.Z, nz, margin, ref lo, ref hi);
        if (!(lo <= hi)) return (1, 0);
        return ((int)Math.Ceiling(lo), (int)Math.Floor(hi));
    }

    private static void Limit(double s, double d, int n, double margin, ref double lo, ref double hi)
    {
        double min = -margin, max = n - 1 + margin;
        if (Math.Abs(d) < 1e-12)
        {
            if (s < min || s > max) { lo = 1; hi = 0; }
            return;
        }
        double t1 = (min - s) / d, t2 = (max - s) / d;
        lo = Math.Max(lo, Math.Min(t1, t2));
        hi = Math.Min(hi, Math.Max(t1, t2));
    }

    private static unsafe void LinearRun<T, TEdge>(T v, Grid g, Vector3D s, Vector3D d, float* row, int x0, int x1)
        where T : struct, IVoxels where TEdge : struct, IEdge
    {
        int si = g.StepI, sj = g.StepJ, sk = g.StepK;
        int maxI = Math.Max(g.Nx - 2, 0), maxJ = Math.Max(g.Ny - 2, 0), maxK = Math.Max(g.Nz - 2, 0);
        double hiI = g.Nx - 1, hiJ = g.Ny - 1, hiK = g.Nz - 1;
        int nx = g.Nx, plane = g.Nx * g.Ny;
        for (int x = x0; x <= x1; x++)
        {
            int xa = x + PrefetchAhead;
            int q = (int)(s.Z + xa * d.Z) * plane + (int)(s.Y + xa * d.Y) * nx + (int)(s.X + xa * d.X);
            v.Prefetch(q);
            v.Prefetch(q + sj);
            v.Prefetch(q + sk);
            v.Prefetch(q + sk + sj);

            double fi = s.X + x * d.X, fj = s.Y + x * d.Y, fk = s.Z + x * d.Z;
            if (TEdge.Clamp)
            {
                fi = Math.Clamp(fi, 0, hiI);
                fj = Math.Clamp(fj, 0, hiJ);
                fk = Math.Clamp(fk, 0, hiK);
            }
            // Inside the hull a rounding error can put a position a hair below 0: truncation still gives index 0.
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

    private static unsafe void NearestRun<T, TEdge>(T v, Grid g, Vector3D s, Vector3D d, float* row, int x0, int x1)
        where T : struct, IVoxels where TEdge : struct, IEdge
    {
        double hiI = g.Nx - 1, hiJ = g.Ny - 1, hiK = g.Nz - 1;
        int nx = g.Nx, plane = g.Nx * g.Ny;
        for (int x = x0; x <= x1; x++)
        {
            int xa = x + PrefetchAhead;
            v.Prefetch((int)(s.Z + xa * d.Z + 0.5) * plane + (int)(s.Y + xa * d.Y + 0.5) * nx + (int)(s.X + xa * d.X + 0.5));
            double fi = s.X + x * d.X, fj = s.Y + x * d.Y, fk = s.Z + x * d.Z;
            if (TEdge.Clamp)
            {
                fi = Math.Clamp(fi, 0, hiI);
                fj = Math.Clamp(fj, 0, hiJ);
                fk = Math.Clamp(fk, 0, hiK);
            }
            // Round half up; inside the hull (or once clamped) +0.5 and truncation never leave the grid.
            int i = Math.Min((int)(fi + 0.5), g.Nx - 1), j = Math.Min((int)(fj + 0.5), g.Ny - 1), k = Math.Min((int)(fk + 0.5), g.Nz - 1);
            row[x] = v[k * plane + j * nx + i];
        }
    }
}
