using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Reslice;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Analytic truths of reslicing: planes along the grid reproduce the grid, corners follow the geometry.</summary>
public class ResliceTests
{
    // Voxel sizes that are powers of two keep every coordinate exact in binary, so "equal" can mean equal.
    private static Volume Numbered(int nx, int ny, int nz, double si, double sj, double sk, string axes = "RIP")
    {
        var volume = new Volume(nx, ny, nz, Affine.FromAxes(AxisCodes.Parse(axes), si, sj, sk, nx, ny, nz, (3, -2, 7)));
        for (int p = 0; p < volume.Voxels.Length; p++) volume.Voxels[p] = (p * 37 % 101) + 0.25f;
        return volume;
    }

    [Theory]
    [InlineData(ResliceSampling.Linear)]
    [InlineData(ResliceSampling.Nearest)]
    public void SectionPlaneAtEachDepthIsThatSection(ResliceSampling interpolation)
    {
        var volume = Numbered(9, 6, 5, 0.5, 0.5, 2);
        int middle = volume.Nz / 2; // the documented centre section
        for (int k = 0; k < volume.Nz; k++)
        {
            var spec = new PlaneSpec(PlaneOrientation.Section, OffsetMm: (k - middle) * 2.0);
            var plane = spec.Build(volume);
            Assert.Equal((volume.Nx, volume.Ny), (plane.Width, plane.Height));
            var image = Reslicer.Reslice(volume, plane, new ResliceOptions(interpolation));
            for (int j = 0; j < volume.Ny; j++)
            for (int i = 0; i < volume.Nx; i++)
                Assert.Equal(volume[i, j, k], image[i, j]);
        }
    }

    [Theory]
    [InlineData("ik")]
    [InlineData("jk")]
    [InlineData("ki")]
    public void OtherGridPlanesAreTheVolumesOwnPlanes(string orientation)
    {
        var volume = Numbered(7, 6, 5, 0.5, 0.5, 0.5, "LAS");
        var o = PlaneOrientation.Parse(orientation);
        // The axis left out is the normal; the plane through its middle index n/2.
        int right = orientation[0] - 'i', down = orientation[1] - 'i', normal = 3 - right - down;
        int[] n = [volume.Nx, volume.Ny, volume.Nz];
        var plane = new PlaneSpec(o).Build(volume);
        Assert.Equal((n[right], n[down]), (plane.Width, plane.Height));
        var image = Reslicer.Reslice(ResliceSource.Compact(volume), plane);
        var index = new int[3];
        index[normal] = n[normal] / 2;
        for (int y = 0; y < plane.Height; y++)
        for (int x = 0; x < plane.Width; x++)
        {
            index[right] = x;
            index[down] = y;
            Assert.Equal(volume[index[0], index[1], index[2]], image[x, y]);
        }
    }

    [Fact]
    public void TrilinearReproducesALinearFieldOnAnObliquePlane()
    {
        // Trilinear interpolation is exact for functions linear in i, j, k (common practice; follows from its
        // definition as a product of 1D linear interpolations).
        var volume = ResliceScipyTests.SmoothRandomVolume(20, 17, 13, seed: 1);
        for (int k = 0; k < volume.Nz; k++)
        for (int j = 0; j < volume.Ny; j++)
        for (int i = 0; i < volume.Nx; i++)
            volume[i, j, k] = 3f * i - 2f * j + 5f * k + 10f;
        var plane = new PlaneSpec(PlaneOrientation.Parse("coronal"), 33, -21, 0.4, PixelSizeMm: 0.15).Build(volume);
        var image = Reslicer.Reslice(volume, plane, new ResliceOptions(Fill: float.NaN));
        var toVoxel = volume.Affine.Inverse();
        int checkedPixels = 0;
        for (int y = 0; y < plane.Height; y++)
        for (int x = 0; x < plane.Width; x++)
        {
            var w = plane.PixelToWorld(x, y);
            var (i, j, k) = toVoxel.Apply(w.X, w.Y, w.Z);
            bool inHull = i >= 0 && i <= volume.Nx - 1 && j >= 0 && j <= volume.Ny - 1 && k >= 0 && k <= volume.Nz - 1;
            bool inCells = i >= -0.5 && i <= volume.Nx - 0.5 && j >= -0.5 && j <= volume.Ny - 0.5 && k >= -0.5 && k <= volume.Nz - 0.5;
            if (inHull)
            {
                Assert.Equal(3 * i - 2 * j + 5 * k + 10, image[x, y], 2e-3);
                checkedPixels++;
            }
            else if (!inCells) Assert.True(float.IsNaN(image[x, y]), $"pixel ({x},{y}) outside the volume should be the fill value");
        }
        Assert.True(checkedPixels > 1000, $"only {checkedPixels} pixels fell inside the volume");
    }

    [Fact]
    public void TiltsTurnTheSectionPlaneAsDocumented()
    {
        // Identity affine: voxel (i, j, k) is world (x, y, z) mm, so the section plane's right is +x, down is +y.
        var volume = new Volume(11, 11, 11, Affine.Identity);
        var flat = new PlaneSpec(PlaneOrientation.Section).Axes(volume.Affine);
        AssertClose(new Vector3D(1, 0, 0), flat.Right);
        AssertClose(new Vector3D(0, 1, 0), flat.Down);
        AssertClose(new Vector3D(0, 0, 1), flat.Depth);
        // 30° about the horizontal axis: down turns towards the depth direction (+k).
        var h = new PlaneSpec(PlaneOrientation.Section, 30).Axes(volume.Affine);
        AssertClose(new Vector3D(1, 0, 0), h.Right);
        AssertClose(new Vector3D(0, Math.Cos(Math.PI / 6), 0.5), h.Down);
        // 90° about the vertical axis: right becomes the old depth direction.
        var v = new PlaneSpec(PlaneOrientation.Section, 0, 90).Axes(volume.Affine);
        AssertClose(new Vector3D(0, 0, 1), v.Right);
        AssertClose(new Vector3D(0, 1, 0), v.Down);
        AssertClose(new Vector3D(-1, 0, 0), v.Depth);
        // On a left-handed grid (RIP: +k is posterior while right × down is anterior), depth still follows +k.
        var rip = new Volume(5, 5, 5, Affine.FromAxes(AxisCodes.Default, 1, 1, 1, 5, 5, 5));
        AssertClose(new Vector3D(0, -1, 0), new PlaneSpec(PlaneOrientation.Section).Axes(rip.Affine).Depth);
    }

    [Fact]
    public void CornersAreWhereTheGeometrySaysInMmAndVoxels()
    {
        // Voxels of 0.5 × 0.25 × 2 mm along R, I, P; a plane tilted 90° about its horizontal axis is the (i, k) plane.
        var volume = Numbered(8, 12, 6, 0.5, 0.25, 2);
        var plane = new PlaneSpec(PlaneOrientation.Section, 90, 0, OffsetMm: 0, PixelSizeMm: 0.5, Width: 8, Height: 24).Build(volume);
        var corners = plane.Corners(volume.Affine);
        Assert.Equal(["top-left", "top-right", "bottom-right", "bottom-left"], corners.Select(c => c.Name));
        // Centre: the volume's centre moved to section index n/2 = 3 along k (its normal at no tilt).
        Vector3D centreVoxel = volume.Affine.Inverse().Apply(plane.Centre.X, plane.Centre.Y, plane.Centre.Z);
        AssertClose(new Vector3D(3.5, 5.5, 3), centreVoxel);
        // Right runs along +i (0.5 mm per pixel = one voxel); down, turned 90° from +j towards +k, runs along +k
        // (0.5 mm per pixel = a quarter of a 2 mm voxel).
        AssertClose(new Vector3D(0, 5.5, 3 - 11.5 * 0.25), corners[0].Voxel);
        AssertClose(new Vector3D(7, 5.5, 3 - 11.5 * 0.25), corners[1].Voxel);
        AssertClose(new Vector3D(7, 5.5, 3 + 11.5 * 0.25), corners[2].Voxel);
        AssertClose(new Vector3D(0, 5.5, 3 + 11.5 * 0.25), corners[3].Voxel);
        foreach (var c in corners)
            AssertClose(volume.Affine.Apply(c.Voxel.X, c.Voxel.Y, c.Voxel.Z), c.WorldMm);
        // In RAS+ mm (RIP axes centred at (3, −2, 7)): +i is +x, +k is −y.
        AssertClose(new Vector3D(3 - 3.5 * 0.5, -2 + 11.5 * 0.5 - 2 * (3 - 2.5), 7), corners[0].WorldMm);
    }

    [Fact]
    public void PlaneBeyondTheVolumeIsAllFill()
    {
        var volume = Numbered(6, 6, 6, 1, 1, 1);
        var spec = new PlaneSpec(PlaneOrientation.Section, 10, 20);
        var (min, max) = spec.OffsetRange(volume);
        var beyond = (spec with { OffsetMm = max + 0.01 }).Build(volume);
        Assert.All(Reslicer.Reslice(volume, beyond, new ResliceOptions(Fill: -1)).Pixels, p => Assert.Equal(-1f, p));
        Assert.Empty(PlaneCut.VoxelPolygon(volume, beyond));
        var inside = (spec with { OffsetMm = max - 0.5 }).Build(volume);
        Assert.Contains(Reslicer.Reslice(volume, inside, new ResliceOptions(Fill: -1)).Pixels, p => p != -1f);
        Assert.True(min < 0 && max > 0);
    }

    [Fact]
    public void CutOfTheMiddleSectionIsTheSectionsRectangle()
    {
        var volume = Numbered(6, 4, 5, 1, 1, 1);
        var polygon = PlaneCut.VoxelPolygon(volume, new PlaneSpec(PlaneOrientation.Section).Build(volume));
        Assert.Equal(4, polygon.Count);
        Assert.All(polygon, p => Assert.Equal(2, p.Z, 9));
        Assert.Equal([-0.5, 5.5], polygon.Select(p => p.X).Distinct().Order().Select(v => Math.Round(v, 9)));
        Assert.Equal([-0.5, 3.5], polygon.Select(p => p.Y).Distinct().Order().Select(v => Math.Round(v, 9)));
        // A plane through a corner region, tilted on both axes, cuts a polygon of 3 to 6 sides.
        var tilted = PlaneCut.VoxelPolygon(volume, new PlaneSpec(PlaneOrientation.Section, 40, 35, 1.2).Build(volume));
        Assert.InRange(tilted.Count, 3, 6);
    }

    [Fact]
    public void CompactCopyChoosesTheNarrowestExactStorageAndSamplesTheSame()
    {
        var bytes = Numbered(10, 9, 8, 1, 1, 1);
        for (int p = 0; p < bytes.Voxels.Length; p++) bytes.Voxels[p] = p % 256;
        Assert.Equal(VoxelStorage.Byte, ResliceSource.Compact(bytes).Storage);
        var words = Numbered(10, 9, 8, 1, 1, 1);
        for (int p = 0; p < words.Voxels.Length; p++) words.Voxels[p] = p * 97 % 60000;
        Assert.Equal(VoxelStorage.UInt16, ResliceSource.Compact(words).Storage);
        var signed = Numbered(10, 9, 8, 1, 1, 1);
        for (int p = 0; p < signed.Voxels.Length; p++) signed.Voxels[p] = p % 300 - 150;
        Assert.Equal(VoxelStorage.Int16, ResliceSource.Compact(signed).Storage);
        Assert.Equal(VoxelStorage.Float, ResliceSource.Compact(Numbered(10, 9, 8, 1, 1, 1)).Storage); // has .25 fractions

        foreach (var volume in new[] { bytes, words, signed })
        {
            var plane = new PlaneSpec(PlaneOrientation.Parse("jk"), 25, -35, 0.7, 0.4).Build(volume);
            foreach (var interpolation in new[] { ResliceSampling.Linear, ResliceSampling.Nearest })
            {
                var options = new ResliceOptions(interpolation, Fill: 3);
                Assert.Equal(Reslicer.Reslice(volume, plane, options).Pixels, Reslicer.Reslice(ResliceSource.Compact(volume), plane, options).Pixels);
            }
        }
    }

    [Fact]
    public void ThreadsGiveTheSameResultAsOne()
    {
        var volume = ResliceScipyTests.SmoothRandomVolume(40, 35, 30, seed: 5);
        var plane = new PlaneSpec(PlaneOrientation.Section, 12, 47, -1, 0.1).Build(volume);
        var one = Reslicer.Reslice(volume, plane, new ResliceOptions(MaxThreads: 1));
        var many = Reslicer.Reslice(volume, plane, new ResliceOptions(MaxThreads: 4));
        Assert.True(plane.Height > 64);
        Assert.Equal(one.Pixels, many.Pixels);
    }

    [Fact]
    public void InsideRangeAgreesWithTestingEachPixel()
    {
        var random = new Random(4);
        for (int trial = 0; trial < 200; trial++)
        {
            var start = new Vector3D(random.NextDouble() * 30 - 10, random.NextDouble() * 30 - 10, random.NextDouble() * 30 - 10);
            var step = new Vector3D(random.NextDouble() - 0.5, random.NextDouble() - 0.5, trial % 5 == 0 ? 0 : random.NextDouble() - 0.5);
            var (x0, x1) = Reslicer.InsideRange(start, step, 9, 7, 5, 60);
            for (int x = 0; x < 60; x++)
            {
                var p = start + x * step;
                bool inside = p.X >= -0.5 && p.X <= 8.5 && p.Y >= -0.5 && p.Y <= 6.5 && p.Z >= -0.5 && p.Z <= 4.5;
                Assert.Equal(inside, x >= x0 && x <= x1);
            }
        }
    }

    [Theory]
    [InlineData("section", "section")]
    [InlineData("IJ", "section")]
    [InlineData("kj", "kj")]
    [InlineData("coronal", "RI")]
    [InlineData("axial", "RP")]
    [InlineData("sagittal", "AI")]
    [InlineData("la", "LA")]
    public void OrientationNamesAreUnderstood(string text, string canonical)
    {
        Assert.True(PlaneOrientation.TryParse(text, out var o, out var problem), problem);
        Assert.Equal(canonical, o.Name);
    }

    [Theory]
    [InlineData("RL")]
    [InlineData("ii")]
    [InlineData("../../etc/passwd")]
    [InlineData("")]
    [InlineData("oblique")]
    public void BadOrientationsAreRefusedWithAReason(string text)
    {
        Assert.False(PlaneOrientation.TryParse(text, out _, out var problem));
        Assert.False(string.IsNullOrWhiteSpace(problem));
        Assert.DoesNotContain('\n', problem);
    }

    [Theory]
    [InlineData(91, 0, 0)]
    [InlineData(0, -90.5, 0)]
    [InlineData(double.NaN, 0, 0)]
    [InlineData(0, 0, double.PositiveInfinity)]
    public void OutOfRangeTiltsAndOffsetsAreInputProblems(double h, double v, double offset)
    {
        var volume = Numbered(4, 4, 4, 1, 1, 1);
        var e = Assert.Throws<InputProblemException>(() => new PlaneSpec(PlaneOrientation.Section, h, v, offset).Build(volume, "vol.nii"));
        Assert.StartsWith("vol.nii: ", e.Message);
    }

    [Fact]
    public void CoronalPlaneOfAWorldAlignedVolumeRunsRightAndDown()
    {
        // RAS-ordered voxels: the coronal plane (image right = R, down = I) steps +i to the right and −k downwards.
        var volume = Numbered(5, 6, 7, 1, 1, 1, "RAS");
        var plane = new PlaneSpec(PlaneOrientation.Parse("coronal")).Build(volume);
        var c = plane.Corners(volume.Affine);
        Assert.True(c[1].Voxel.X > c[0].Voxel.X);
        Assert.True(c[3].Voxel.Z < c[0].Voxel.Z);
        Assert.Equal(c[0].Voxel.Y, c[2].Voxel.Y, 9);
    }

    [Fact]
    public void RobustWindowIsExactForALargeUniformBackground()
    {
        // 3 million zeros and 1 million values 1..100: the 0.5th percentile is exactly 0, and the 99.5th is the
        // value at rank 0.995·(n − 1) in numpy's linear definition, counted out below (sorted values in closed form).
        var values = new float[4_000_000];
        for (int p = 3_000_000; p < values.Length; p++) values[p] = 1 + (p - 3_000_000) % 100;
        var window = IntensityWindow.FromPercentiles(values, 0.5, 99.5);
        Assert.Equal(0, window.Low);
        // Rank 0.995 × 3 999 999 = 3 979 999.005 falls among the 1e6 non-zero values at position 979 999, i.e. the
        // values 1..100 each appear 10 000 times: positions 970 000..979 999 hold 98, 980 000.. hold 99.
        Assert.Equal(98 + 0.005, window.High, 9);
    }

    private static void AssertClose(Vector3D expected, Vector3D actual, double tolerance = 1e-9)
    {
        Assert.True((expected - actual).Length <= tolerance, $"expected {expected}, got {actual}");
    }
}
