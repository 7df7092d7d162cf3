using StackBuild.Geometry;
using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The warp that skips the source's zero surround (used for every rotation hypothesis) must give the plain warp's output
/// bit for bit, or registration results would change with it.
/// </summary>
public sealed class WarpBoxTests
{
    [Theory]
    [InlineData(0.0, 0.0, 0.0, false)]
    [InlineData(37.3, 12.25, -7.5, false)]
    [InlineData(-123.9, -40.7, 33.1, true)]
    [InlineData(180.0, 0.5, 0.5, true)]
    [InlineData(90.0, 200.0, 0.0, false)] // moved almost off the canvas
    public void SkippingTheZeroSurroundChangesNoBit(double degrees, double dx, double dy, bool mirrored)
    {
        const int n = 96;
        var rng = new Random(7);
        var source = new float[n * n];
        (int X0, int Y0, int X1, int Y1) box = (20, 31, 70, 60);
        for (int y = box.Y0; y <= box.Y1; y++)
        for (int x = box.X0; x <= box.X1; x++)
            source[y * n + x] = rng.Next(4) == 0 ? -0f : (float)(rng.NextDouble() * 2 - 0.5); // negative values and −0 too
        double c = (n - 1) / 2.0;
        var move = (mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, c, c)).Then(Transform2D.Translation(dx, dy));
        var plain = new float[n * n];
        var skipping = new float[n * n];
        ImageOps.Warp(source, n, move, plain);
        ImageOps.Warp(source, n, move, skipping, box);
        for (int i = 0; i < plain.Length; i++)
            Assert.True(BitConverter.SingleToInt32Bits(plain[i]) == BitConverter.SingleToInt32Bits(skipping[i]), $"pixel {i}: {plain[i]} against {skipping[i]}");
    }

    [Fact]
    public void AnAllZeroSourceWarpsToPositiveZeros()
    {
        const int n = 16;
        var output = Enumerable.Repeat(1f, n * n).ToArray();
        ImageOps.Warp(new float[n * n], n, Transform2D.Rotation(10, 7.5, 7.5), output, (n, n, -1, -1));
        Assert.All(output, v => Assert.Equal(0, BitConverter.SingleToInt32Bits(v)));
    }
}
