using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The bilinear samplers (Imaging/Bilinear.cs) against values worked by hand from the definition
/// f(x0 + tx, y0 + ty) = (1−tx)(1−ty)·a + tx(1−ty)·b + (1−tx)ty·c + tx·ty·d (common practice), and their edge rules.
/// </summary>
public class BilinearTests
{
    private static GrayImage Ramp()
    {
        // f(x, y) = x + 10·y on a 4×3 image: bilinear interpolation reproduces a plane exactly.
        var image = new GrayImage(4, 3);
        for (int y = 0; y < 3; y++)
            for (int x = 0; x < 4; x++) image[x, y] = x + 10 * y;
        return image;
    }

    [Fact]
    public void InsideEverySamplerGivesThePlane()
    {
        var image = Ramp();
        foreach (var (x, y) in new[] { (0.25, 0.5), (1.5, 1.75), (2.9, 0.1), (3.0, 2.0) })
        {
            double expected = x + 10 * y;
            Assert.Equal(expected, Bilinear.Sample(image, x, y), 4);
            Assert.Equal(expected, Bilinear.SampleInside(image.Pixels, 4, 3, x, y), 4);
            Assert.Equal(expected, Bilinear.SampleEdgeClamped(image, x, y), 4);
        }
        var canvas = new float[16];
        for (int y = 0; y < 4; y++)
            for (int x = 0; x < 4; x++) canvas[y * 4 + x] = x + 10 * y;
        Assert.Equal(1.5 + 10 * 2.25, Bilinear.Canvas(canvas, 4, 1, 2, 0.5f, 0.25f), 4);
        Assert.Equal(Bilinear.Canvas(canvas, 4, 1, 2, 0.5f, 0.25f), Bilinear.CanvasFast(canvas, 4, 1, 2, 0.5f, 0.25f));
    }

    [Fact]
    public void EachSamplerKeepsItsOwnEdgeRule()
    {
        var image = Ramp();
        // Within half a pixel past the edge: the edge value; beyond it: the value asked for.
        Assert.Equal(3 + 10 * 1, Bilinear.Sample(image, 3.4, 1), 4);
        Assert.Equal(-7f, Bilinear.Sample(image, 3.6, 1, -7f));
        // Clamped: any distance past the edge gives the edge value, never a made-up one.
        Assert.Equal(3 + 10 * 2, Bilinear.SampleEdgeClamped(image, 50, 9), 4);
        // A canvas is zero outside: half way past the last column is half its value.
        var canvas = new float[] { 1, 1, 1, 1 };
        Assert.Equal(0.5f, Bilinear.Canvas(canvas, 2, 1, 0, 0.5f, 0f));
        // Periodic: one period away is the same sample.
        var periodic = new float[] { 0, 1, 2, 3, 4, 5, 6, 7, 8 };
        Assert.Equal(Bilinear.Periodic(periodic, 3, 0.5, 0.5), Bilinear.Periodic(periodic, 3, 3.5, -2.5), 12);
        Assert.Equal(2.0, Bilinear.Periodic(periodic, 3, 0.5, 0.5), 12); // (0 + 1 + 3 + 4) / 4
    }
}
