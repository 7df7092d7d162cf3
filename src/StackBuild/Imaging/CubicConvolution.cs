namespace StackBuild.Imaging;

/// <summary>
/// Cubic convolution interpolation with a = −0.5 (Keys 1981, IEEE Trans. ASSP 29:1153; the Catmull-Rom spline): the one
/// kernel of the project, used by bicubic resampling and by the gap filler's warps.
/// </summary>
public static class CubicConvolution
{
    /// <summary>The four weights for the samples at x0 − 1, x0, x0 + 1, x0 + 2 when the point lies at x0 + <paramref name="t"/>, t in [0, 1).</summary>
    public static void Weights(double t, Span<double> w)
    {
        const double a = -0.5;
        double t2 = t * t, t3 = t2 * t;
        w[0] = a * (t3 - 2 * t2 + t);
        w[1] = (a + 2) * t3 - (a + 3) * t2 + 1;
        w[2] = -(a + 2) * t3 + (2 * a + 3) * t2 - a * t;
        w[3] = -a * (t3 - t2);
    }

    /// <summary>
    /// The interpolated value at (x0 + tx, y0 + ty) from the 4 × 4 pixels around it; pixels beyond the edge are taken from
    /// the nearest edge pixel. Callers decide what happens to points outside the image.
    /// </summary>
    public static float Sample(GrayImage image, int x0, int y0, double tx, double ty)
    {
        Span<double> wx = stackalloc double[4];
        Span<double> wy = stackalloc double[4];
        Weights(tx, wx);
        Weights(ty, wy);
        double sum = 0;
        for (int m = 0; m < 4; m++)
        {
            int yy = Math.Clamp(y0 - 1 + m, 0, image.Height - 1);
            double rowSum = 0;
            for (int n = 0; n < 4; n++)
            {
                int xx = Math.Clamp(x0 - 1 + n, 0, image.Width - 1);
                rowSum += wx[n] * image.Pixels[yy * image.Width + xx];
            }
            sum += wy[m] * rowSum;
        }
        return (float)sum;
    }
}
