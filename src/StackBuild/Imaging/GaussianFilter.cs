namespace StackBuild.Imaging;

/// <summary>Separable Gaussian smoothing of a <see cref="GrayImage"/>, edges repeated (the nearest pixel stands in beyond them).</summary>
public static class GaussianFilter
{
    /// <summary>Weights exp(−x²/2σ²) for |x| ≤ <paramref name="radius"/>, summing to 1.</summary>
    public static double[] Kernel(double sigma, int radius)
    {
        var k = new double[2 * radius + 1];
        double sum = 0;
        for (int x = -radius; x <= radius; x++) sum += k[x + radius] = Math.Exp(-0.5 * x * x / (sigma * sigma));
        for (int i = 0; i < k.Length; i++) k[i] /= sum;
        return k;
    }

    /// <summary>The kernel radius SciPy's <c>ndimage.gaussian_filter</c> uses: ⌊truncate·σ + 0.5⌋ (truncate 4 by default).</summary>
    public static int ScipyRadius(double sigma, double truncate = 4) => (int)(truncate * sigma + 0.5);

    /// <summary>Smooths with a Gaussian of σ = <paramref name="sigma"/> px on both axes, the kernel cut at 3σ (at least one pixel).</summary>
    public static GrayImage Blur(GrayImage image, double sigma)
    {
        var kernel = Kernel(sigma, Radius(sigma));
        return Blur(image, kernel, kernel);
    }

    /// <summary>The kernel radius the project's own blurs use: ⌈3σ⌉, at least 1.</summary>
    public static int Radius(double sigma) => Math.Max(1, (int)Math.Ceiling(3 * sigma));

    /// <summary>
    /// As <see cref="Blur(GrayImage, double)"/> on a plain array, in single precision throughout (kernel and sums): the
    /// registration's tissue masks and the midline's high-pass were measured with this arithmetic, so it is kept as it is.
    /// </summary>
    public static float[] BlurSingle(ReadOnlySpan<float> pixels, int width, int height, double sigma)
    {
        int radius = Radius(sigma);
        var kernel = new float[2 * radius + 1];
        double sum = 0;
        for (int i = -radius; i <= radius; i++) sum += kernel[i + radius] = (float)Math.Exp(-0.5 * i * i / (sigma * sigma));
        for (int i = 0; i < kernel.Length; i++) kernel[i] /= (float)sum;
        var temp = new float[width * height];
        var result = new float[width * height];
        for (int y = 0; y < height; y++)
        {
            var src = pixels.Slice(y * width, width);
            for (int x = 0; x < width; x++)
            {
                float s = 0;
                for (int k = -radius; k <= radius; k++) s += kernel[k + radius] * src[Math.Clamp(x + k, 0, width - 1)];
                temp[y * width + x] = s;
            }
        }
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            float s = 0;
            for (int k = -radius; k <= radius; k++) s += kernel[k + radius] * temp[Math.Clamp(y + k, 0, height - 1) * width + x];
            result[y * width + x] = s;
        }
        return result;
    }

    /// <summary>Smooths along x with <paramref name="kernelX"/> and then along y with <paramref name="kernelY"/>; a null kernel leaves that axis alone.</summary>
    public static GrayImage Blur(GrayImage image, double[]? kernelX, double[]? kernelY)
    {
        int w = image.Width, h = image.Height;
        var source = image.Pixels;
        var across = new float[w * h];
        if (kernelX is null) Array.Copy(source, across, source.Length);
        else
        {
            int r = kernelX.Length / 2;
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                double s = 0;
                for (int k = -r; k <= r; k++) s += kernelX[k + r] * source[y * w + Math.Clamp(x + k, 0, w - 1)];
                across[y * w + x] = (float)s;
            }
        }
        if (kernelY is null) return new GrayImage(w, h, across);
        var result = new GrayImage(w, h);
        int ry = kernelY.Length / 2;
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            double s = 0;
            for (int k = -ry; k <= ry; k++) s += kernelY[k + ry] * across[Math.Clamp(y + k, 0, h - 1) * w + x];
            result.Pixels[y * w + x] = (float)s;
        }
        return result;
    }
}
