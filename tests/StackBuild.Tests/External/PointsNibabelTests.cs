using System.Globalization;
using Xunit;

namespace StackBuild.Tests;

/// <summary>`stackbuild points`' world coordinates against nibabel's affine of the volume the build wrote.</summary>
[Collection(ApplyDemoCollection.Name)]
public sealed class PointsNibabelTests(ApplyDemoFixture demo)
{
    [Fact]
    public void VoxelToWorldAgreesWithNibabelsAffine()
    {
        var input = Path.Combine(demo.Folder, "nibabel-marks.csv");
        File.WriteAllText(input, "section,x,y\n2,10,20\n10,80.5,60.25\n14,150,3\n20,0,0\n");
        var output = Path.Combine(demo.Folder, "nibabel-marks-out.csv");
        Assert.Equal(0, CliRun.Run("points", demo.Paths.Sidecar, "--in", input, "-o", output).Code);

        var world = NiftiPython.RunJsonList("nibabel_points.py", demo.Paths.Volume, output);
        var rows = File.ReadAllLines(output).Skip(1).Select(l => l.Split(',')[^3..].Select(v => double.Parse(v, CultureInfo.InvariantCulture)).ToArray()).ToArray();
        Assert.Equal(4, world.Length);
        for (int n = 0; n < rows.Length; n++)
            for (int c = 0; c < 3; c++)
                // nibabel's affine: nibabel.affines.apply_affine with the sform it reads from the volume (stored as float32,
                // so agreement to 1e-5 mm, far below a voxel of 20 µm).
                Assert.Equal(world[n][c].GetDouble(), rows[n][c], 1e-5);
    }
}
