using System.Buffers;

namespace StackBuild.Demo;

/// <summary>
/// Smooth lattice value noise: random values on an integer lattice, blended with the smoothstep weight
/// 3t² − 2t³ (the lattice-noise family of procedural texturing; Perlin 1985, "An image synthesizer",
/// SIGGRAPH; cited from memory). Values lie in [−1, 1]; the same (seed, coordinates) always give the same value.
/// </summary>
internal static class LatticeNoise
{
    /// <summary>Value in [−1, 1] at an integer lattice point.</summary>
    public static float At(ulong seed, long x, long y, long z)
    {
        ulong h = DemoRandom.Mix(seed ^ (ulong)x * 0xD6E8FEB86659FD93UL);
        h = DemoRandom.Mix(h ^ (ulong)y * 0xA0761D6478BD642FUL);
        h = DemoRandom.Mix(h ^ (ulong)z * 0xE7037ED1A0B428DBUL);
        return (float)((h >> 40) * (2.0 / (1UL << 24)) - 1.0);
    }

    public static double Smooth(double t) => t * t * (3 - 2 * t);

    /// <summary>One-dimensional noise at <paramref name="x"/> (lattice spacing 1).</summary>
    public static double Line(ulong seed, double x)
    {
        double f = Math.Floor(x);
        long i = (long)f;
        double w = Smooth(x - f);
        return At(seed, i, 0, 0) * (1 - w) + At(seed, i + 1, 0, 0) * w;
    }

    /// <summary>
    /// Adds <paramref name="weight"/> × noise to a w × h plane: lattice spacing <paramref name="cell"/> pixels
    /// in the plane, and the plane sits at lattice depth <paramref name="depth"/> (so neighbouring planes with
    /// nearby depths get related patterns). The in-plane lattice is blended once per plane, then each pixel
    /// is a bilinear smoothstep blend of four lattice values; no allocation per pixel.
    /// </summary>
    public static void AddToPlane(Span<float> plane, int w, int h, ulong seed, double cell, double depth, float weight)
    {
        int lw = (int)Math.Ceiling((w - 1) / cell) + 2, lh = (int)Math.Ceiling((h - 1) / cell) + 2;
        double fz = Math.Floor(depth);
        long z0 = (long)fz;
        float wz = (float)Smooth(depth - fz);
        var lattice = ArrayPool<float>.Shared.Rent(lw * lh);
        var column = ArrayPool<int>.Shared.Rent(w);
        var columnWeight = ArrayPool<float>.Shared.Rent(w);
        try
        {
            for (int ly = 0; ly < lh; ly++)
            for (int lx = 0; lx < lw; lx++)
                lattice[ly * lw + lx] = At(seed, lx, ly, z0) * (1 - wz) + At(seed, lx, ly, z0 + 1) * wz;
            for (int x = 0; x < w; x++)
            {
                double fx = x / cell, f = Math.Floor(fx);
                column[x] = (int)f;
                columnWeight[x] = (float)Smooth(fx - f);
            }
            for (int y = 0; y < h; y++)
            {
                double fy = y / cell, f = Math.Floor(fy);
                int row = (int)f;
                float wy = (float)Smooth(fy - f);
                var top = lattice.AsSpan(row * lw, lw);
                var bottom = lattice.AsSpan((row + 1) * lw, lw);
                var target = plane.Slice(y * w, w);
                for (int x = 0; x < w; x++)
                {
                    int c = column[x];
                    float wx = columnWeight[x];
                    float t = top[c] + (top[c + 1] - top[c]) * wx;
                    float b = bottom[c] + (bottom[c + 1] - bottom[c]) * wx;
                    target[x] += weight * (t + (b - t) * wy);
                }
            }
        }
        finally
        {
            ArrayPool<float>.Shared.Return(lattice);
            ArrayPool<int>.Shared.Return(column);
            ArrayPool<float>.Shared.Return(columnWeight);
        }
    }
}
