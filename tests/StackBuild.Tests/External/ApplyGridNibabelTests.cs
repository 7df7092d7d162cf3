using System.Text.Json;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// `stackbuild apply --output-pixel-size` against nibabel's reading of the written affines: the grid of another voxel size
/// keeps the outer corner of the build's first voxel (voxel −0.5, −0.5) at its world position and covers the build's extent.
/// </summary>
[Collection(ApplyDemoCollection.Name)]
public sealed class ApplyGridNibabelTests(ApplyDemoFixture demo)
{
    // The sform is stored as float32: nibabel's positions agree with ours to about 1e-5 mm over a few mm.
    private const double ToleranceMm = 2e-5;

    [Theory]
    [InlineData("10")] // half the build's 20 µm: exactly 2 × 2 voxels per build voxel
    [InlineData("7")]  // 20 / 7 is not whole: the last voxel reaches past the build's far edge
    public void TheFinerGridKeepsTheFirstVoxelsOuterCornerAndTheExtent(string pixelUm)
    {
        double size = double.Parse(pixelUm, System.Globalization.CultureInfo.InvariantCulture);
        var output = Path.Combine(demo.Folder, $"grid-{pixelUm}.nii.gz");
        var (code, stdout, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "--output-pixel-size", pixelUm, "-o", output);
        Assert.True(code == 0, err);
        Assert.Contains("its first voxel's outer corner in place", stdout);

        var grids = NiftiPython.RunJsonList("nibabel_grid_corners.py", demo.Paths.Volume, output);
        var (build, applied) = (grids[0], grids[1]);
        int[] Shape(JsonElement g) => g.GetProperty("shape").EnumerateArray().Select(v => v.GetInt32()).ToArray();
        double[] Get(JsonElement g, string name) => g.GetProperty(name).EnumerateArray().Select(v => v.GetDouble()).ToArray();

        var (nb, na) = (Shape(build), Shape(applied));
        double r = 20 / size;
        Assert.Equal((int)Math.Ceiling(nb[0] * r - 1e-9), na[0]);
        Assert.Equal((int)Math.Ceiling(nb[1] * r - 1e-9), na[1]);
        Assert.Equal(nb[2], na[2]); // the planes stay the build's
        var zooms = Get(applied, "zooms");
        Assert.Equal(size / 1000, zooms[0], 1e-7);
        Assert.Equal(size / 1000, zooms[1], 1e-7);
        Assert.Equal(Get(build, "zooms")[2], zooms[2], 1e-7);

        // The fixed point: the outer corner of voxel (0, 0, 0), in nibabel's world millimetres.
        var (first, firstApplied) = (Get(build, "first_corner"), Get(applied, "first_corner"));
        for (int c = 0; c < 3; c++) Assert.Equal(first[c], firstApplied[c], ToleranceMm);
        // The far corner: the same when the sizes divide evenly; otherwise past the build's by less than one voxel along
        // each in-plane axis (measured in the build's own voxel coordinates, so orientation does not matter).
        var far = Get(build, "far_corner");
        var farApplied = Get(applied, "far_corner");
        double beyondI = na[0] * size / 1000 - nb[0] * 0.020, beyondJ = na[1] * size / 1000 - nb[1] * 0.020;
        Assert.InRange(beyondI, -1e-9, size / 1000);
        Assert.InRange(beyondJ, -1e-9, size / 1000);
        double gap = Math.Sqrt(Enumerable.Range(0, 3).Sum(c => Math.Pow(far[c] - farApplied[c], 2)));
        Assert.Equal(Math.Sqrt(beyondI * beyondI + beyondJ * beyondJ), gap, 1e-4);
        if (pixelUm == "10")
            for (int c = 0; c < 3; c++) Assert.Equal(far[c], farApplied[c], ToleranceMm);

        // The sidecar records the grid used and the point kept.
        var sidecar = JsonDocument.Parse(File.ReadAllText(Path.ChangeExtension(Path.ChangeExtension(output, null), ".json"))).RootElement.GetProperty("grid");
        Assert.Equal(size, sidecar.GetProperty("output_pixel_size_um").GetDouble());
        Assert.Equal(20, sidecar.GetProperty("build_output_pixel_size_um").GetDouble());
        Assert.Contains("outer corner of voxel (0, 0)", sidecar.GetProperty("kept").GetString());
    }
}
