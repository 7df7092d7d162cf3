using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Numerics;

namespace StackBuild.Tests;

/// <summary>Synthetic images and resampling for the registration tests (independent of the code under test).</summary>
internal static class RegisterTestImages
{
    /// <summary>
    /// A textured "section": an irregular, asymmetric blob of tissue (random Gaussian spots on a base level)
    /// on a dark background with faint noise. Tissue fills roughly the middle half of the image.
    /// </summary>
    public static GrayImage Tissue(int width, int height, int seed)
    {
        var rng = new Random(seed);
        var img = new GrayImage(width, height);
        double cx = width / 2.0, cy = height / 2.0, rx = 0.3 * width, ry = 0.26 * height;
        var harmonics = Enumerable.Range(2, 4).Select(k => (k, a: rng.NextDouble() * 0.12, p: rng.NextDouble() * 2 * Math.PI)).ToArray();
        var spots = Enumerable.Range(0, 80).Select(_ => (
            x: cx + (rng.NextDouble() * 2 - 1) * rx, y: cy + (rng.NextDouble() * 2 - 1) * ry,
            s: 2 + rng.NextDouble() * 0.03 * width, a: rng.NextDouble() * 0.6 - 0.2)).ToArray();
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            double dx = (x - cx) / rx, dy = (y - cy) / ry, angle = Math.Atan2(dy, dx);
            double edge = 1 + harmonics.Sum(h => h.a * Math.Cos(h.k * angle + h.p));
            double inside = 1 / (1 + Math.Exp((Math.Sqrt(dx * dx + dy * dy) - edge) * 25));
            double texture = 0.45;
            foreach (var s in spots) texture += s.a * Math.Exp(-((x - s.x) * (x - s.x) + (y - s.y) * (y - s.y)) / (2 * s.s * s.s));
            img[x, y] = (float)Math.Clamp(0.05 + inside * texture + 0.01 * rng.NextDouble(), 0, 1);
        }
        return img;
    }

    /// <summary>Output of the given size with out(p) = source(T⁻¹·p), bilinear (the content moves by T).</summary>
    public static GrayImage Move(GrayImage source, Transform2D moveBy, int width, int height, float outside = 0f)
    {
        var inv = moveBy.Inverse();
        var result = new GrayImage(width, height);
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            var (sx, sy) = inv.Apply(x, y);
            result[x, y] = source.SampleBilinear(sx, sy, outside);
        }
        return result;
    }

    /// <summary>
    /// The image circularly shifted by (dx, dy) through the Fourier shift theorem: F'(k) = F(k)·e^(−2πi k·d/N)
    /// (common practice; the test image of Guizar-Sicairos et al. 2008 was made the same way).
    /// </summary>
    public static GrayImage FourierShift(GrayImage image, double dx, double dy)
    {
        int w = image.Width, h = image.Height;
        var fft = Fft2D.Create(w, h, FftProvider.Managed);
        using var data = new ComplexImage(w, h);
        data.SetReal(image.Pixels);
        fft.Forward(data);
        var s = data.Span;
        for (int ky = 0; ky < h; ky++)
        {
            double fy = ky < (h + 1) / 2 ? ky : ky - h;
            for (int kx = 0; kx < w; kx++)
            {
                double fx = kx < (w + 1) / 2 ? kx : kx - w;
                double a = -2 * Math.PI * (fx * dx / w + fy * dy / h);
                s[ky * w + kx] *= new MathNet.Numerics.Complex32((float)Math.Cos(a), (float)Math.Sin(a));
            }
        }
        fft.Inverse(data);
        var result = new GrayImage(w, h);
        for (int i = 0; i < s.Length; i++) result.Pixels[i] = s[i].Real;
        return result;
    }

    /// <summary>Distance between where the estimate and the truth send the point (x, y).</summary>
    public static double PointError(Transform2D estimate, Transform2D truth, double x, double y)
    {
        var (ex, ey) = estimate.Apply(x, y);
        var (tx, ty) = truth.Apply(x, y);
        return Math.Sqrt((ex - tx) * (ex - tx) + (ey - ty) * (ey - ty));
    }

    /// <summary>Rotation difference in degrees, wrapped to [0, 180].</summary>
    public static double AngleError(double a, double b)
    {
        double d = Math.Abs(a - b) % 360;
        return Math.Min(d, 360 - d);
    }

    public static double Median(IEnumerable<double> values)
    {
        var v = values.OrderBy(x => x).ToArray();
        return v.Length == 0 ? double.NaN : v.Length % 2 == 1 ? v[v.Length / 2] : 0.5 * (v[v.Length / 2 - 1] + v[v.Length / 2]);
    }
}
