using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The accuracy table's template (<see cref="AccuracyRun.CoarseTemplate"/>).</summary>
public sealed class CoarseTemplateTests
{
    private static Volume Ramp(int nx, int ny, int nz)
    {
        // A 1 mm volume with a shifted, turned-free affine and distinct values everywhere.
        var v = new Volume(nx, ny, nz, Affine.FromRows([1, 0, 0, -10], [0, 1, 0, 20], [0, 0, 1, -30]));
        for (int k = 0; k < nz; k++)
        for (int j = 0; j < ny; j++)
        for (int i = 0; i < nx; i++) v[i, j, k] = i + 10 * j + 100 * k + (i * j % 7);
        return v;
    }

    [Fact]
    public void AnOddLastPlaneKeepsABlockOfItsOwnAndTheWholeBlocksAreUnchanged()
    {
        var odd = Ramp(9, 7, 5);
        for (int k = 0; k < 5; k++) for (int j = 0; j < 7; j++) odd[8, j, k] = 5000; // the last plane far above the rest
        var template = AccuracyRun.CoarseTemplate(odd, 3);
        Assert.Equal((5, 4, 3), (template.Nx, template.Ny, template.Nz));
        // The source's last voxel centre lies inside the template's extent (within half a template voxel of its last centre).
        var last = odd.Affine.Apply(8, 6, 4);
        var t = template.Affine.Apply(4, 3, 2);
        Assert.True(Math.Abs(last.X - t.X) <= 1 && Math.Abs(last.Y - t.Y) <= 1 && Math.Abs(last.Z - t.Z) <= 1, $"{last} against {t}");
        // The whole blocks, values and noise, are those of the even part alone (the recipe that drops the odd planes).
        var even = new Volume(8, 6, 4, odd.Affine);
        for (int k = 0; k < 4; k++) for (int j = 0; j < 6; j++) for (int i = 0; i < 8; i++) even[i, j, k] = odd[i, j, k];
        var dropped = AccuracyRun.CoarseTemplate(even, 3);
        Assert.Equal((4, 3, 2), (dropped.Nx, dropped.Ny, dropped.Nz));
        for (int k = 0; k < 2; k++) for (int j = 0; j < 3; j++) for (int i = 0; i < 4; i++) Assert.Equal(dropped[i, j, k], template[i, j, k]);
        Assert.Equal(dropped.Affine.Apply(0, 0, 0), template.Affine.Apply(0, 0, 0));
        // The last block of the odd axis holds the last plane (counted twice): far above the 0–200 the rest is scaled to.
        for (int k = 0; k < 3; k++) for (int j = 0; j < 4; j++) Assert.True(template[4, j, k] > 400, $"{template[4, j, k]} at (4, {j}, {k})");
    }
}
