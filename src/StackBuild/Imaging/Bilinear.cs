using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;

namespace StackBuild.Imaging;

/// <summary>
/// Bilinear sampling, the one place for it. The samplers differ only in what they do at and beyond the edge, which each
/// caller needs differently, and in float or double arithmetic (each keeps the arithmetic its callers' results were
/// measured with, so outputs stay bit for bit what they were):
/// <list type="bullet">
/// <item><see cref="Sample"/>: a section or plane image; within half a pixel of the edge the edge value, beyond it
/// <c>outside</c> (rendering, the demo's mounting).</item>
/// <item><see cref="SampleInside"/>: the same rule on a raw row-major buffer, for callers that already tested the half-pixel
/// rule in a hot loop (mutual information).</item>
/// <item><see cref="SampleEdgeClamped"/>: every position moved to the nearest edge first, never a made-up value (gap
/// filling's flow, where a zero at the border would be a false edge).</item>
/// <item><see cref="Canvas"/> / <see cref="CanvasFast"/>: a square registration canvas, zero outside.</item>
/// <item><see cref="Periodic"/>: a square periodic image (an FFT magnitude), wrapped around.</item>
/// </list>
/// </summary>
public static class Bilinear
{
    /// <summary>Bilinear sample of <paramref name="image"/> at (x, y) in pixel coordinates; <paramref name="outside"/> beyond half a pixel past the edge.</summary>
    public static float Sample(GrayImage image, double x, double y, float outside = 0f)
    {
        int width = image.Width, height = image.Height;
        if (x < -0.5 || y < -0.5 || x > width - 0.5 || y > height - 0.5) return outside;
        double fx = Math.Clamp(x, 0, width - 1), fy = Math.Clamp(y, 0, height - 1);
        int x0 = Math.Min((int)fx, width - 2 < 0 ? 0 : width - 2), y0 = Math.Min((int)fy, height - 2 < 0 ? 0 : height - 2);
        int x1 = Math.Min(x0 + 1, width - 1), y1 = Math.Min(y0 + 1, height - 1);
        double tx = fx - x0, ty = fy - y0;
        var p = image.Pixels;
        double top = p[y0 * width + x0] * (1 - tx) + p[y0 * width + x1] * tx;
        double bottom = p[y1 * width + x0] * (1 - tx) + p[y1 * width + x1] * tx;
        return (float)(top * (1 - ty) + bottom * ty);
    }

    /// <summary>
    /// Bilinear sample of a <paramref name="width"/>×<paramref name="height"/> row-major buffer at (x, y), which the caller
    /// has checked lies within half a pixel of the image (<see cref="Sample"/>'s rule); positions there are clamped to the edge.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double SampleInside(ReadOnlySpan<float> s, int width, int height, double x, double y)
    {
        double xMax = width - 1, yMax = height - 1;
        double fx = x < 0 ? 0 : x > xMax ? xMax : x, fy = y < 0 ? 0 : y > yMax ? yMax : y;
        int x0 = (int)fx, y0 = (int)fy;
        if (x0 > width - 2) x0 = Math.Max(0, width - 2);
        if (y0 > height - 2) y0 = Math.Max(0, height - 2);
        int x1 = Math.Min(x0 + 1, width - 1), y1 = Math.Min(y0 + 1, height - 1);
        double tx = fx - x0, ty = fy - y0;
        int r0 = y0 * width, r1 = y1 * width;
        double top = s[r0 + x0] + (s[r0 + x1] - s[r0 + x0]) * tx;
        double bottom = s[r1 + x0] + (s[r1 + x1] - s[r1 + x0]) * tx;
        return top + (bottom - top) * ty;
    }

    /// <summary>Bilinear sample with positions outside the image moved to its nearest edge (no made-up zeros at the border).</summary>
    public static float SampleEdgeClamped(GrayImage image, double x, double y)
    {
        int w = image.Width, h = image.Height;
        if (!double.IsFinite(x) || !double.IsFinite(y)) return image.Pixels[0];
        double fx = Math.Clamp(x, 0, w - 1), fy = Math.Clamp(y, 0, h - 1);
        int x0 = Math.Min((int)fx, Math.Max(0, w - 2)), y0 = Math.Min((int)fy, Math.Max(0, h - 2));
        int x1 = Math.Min(x0 + 1, w - 1), y1 = Math.Min(y0 + 1, h - 1);
        float tx = (float)(fx - x0), ty = (float)(fy - y0);
        var p = image.Pixels;
        float top = p[y0 * w + x0] + (p[y0 * w + x1] - p[y0 * w + x0]) * tx;
        float bottom = p[y1 * w + x0] + (p[y1 * w + x1] - p[y1 * w + x0]) * tx;
        return top + (bottom - top) * ty;
    }

    /// <summary>
    /// <see cref="Canvas"/>, the same arithmetic, with the four neighbours read without bounds checks when all lie
    /// inside the canvas.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    internal static float CanvasFast(ReadOnlySpan<float> s, int n, int x0, int y0, float tx, float ty)
    {
        if ((uint)x0 >= (uint)(n - 1) || (uint)y0 >= (uint)(n - 1) || s.Length < n * n) return Canvas(s, n, x0, y0, tx, ty);
        ref float r = ref Unsafe.Add(ref MemoryMarshal.GetReference(s), y0 * n + x0);
        float a = r, b = Unsafe.Add(ref r, 1);
        float c = Unsafe.Add(ref r, n), d = Unsafe.Add(ref r, n + 1);
        return (a + (b - a) * tx) * (1 - ty) + (c + (d - c) * tx) * ty;
    }

    /// <summary>Bilinear sample of an n×n canvas at (x0 + tx, y0 + ty), 0 outside.</summary>
    internal static float Canvas(ReadOnlySpan<float> s, int n, int x0, int y0, float tx, float ty)
    {
        float a = At(s, n, x0, y0), b = At(s, n, x0 + 1, y0);
        float c = At(s, n, x0, y0 + 1), d = At(s, n, x0 + 1, y0 + 1);
        return (a + (b - a) * tx) * (1 - ty) + (c + (d - c) * tx) * ty;
    }

    private static float At(ReadOnlySpan<float> s, int n, int x, int y) =>
        (uint)x < (uint)n && (uint)y < (uint)n ? s[y * n + x] : 0f;

    /// <summary>Bilinear sample of an n×n periodic image (row-major) at (x, y), wrapped around in both directions.</summary>
    internal static double Periodic(float[] m, int n, double x, double y)
    {
        int x0 = (int)Math.Floor(x), y0 = (int)Math.Floor(y);
        double tx = x - x0, ty = y - y0;
        double At(int xx, int yy) => m[Mod(yy, n) * n + Mod(xx, n)];
        return (At(x0, y0) * (1 - tx) + At(x0 + 1, y0) * tx) * (1 - ty) + (At(x0, y0 + 1) * (1 - tx) + At(x0 + 1, y0 + 1) * tx) * ty;
    }

    private static int Mod(int a, int n) => ((a % n) + n) % n;
}
