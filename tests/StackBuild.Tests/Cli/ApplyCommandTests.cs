using Xunit;

namespace StackBuild.Tests;

[Collection(ApplyDemoCollection.Name)]
public sealed class ApplyCommandTests(ApplyDemoFixture demo)
{
    [Fact]
    public void ApplyFromTheCommandLineReportsTheMissingSectionOnOneLine()
    {
        var output = Path.Combine(demo.Folder, "cli-b.nii.gz");
        var (code, stdout, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "--pixel-size", "10", "-o", output);

        Assert.True(code == 0, err);
        Assert.Single(stdout.Split('\n'), l => l.StartsWith($"warning: no image for section {demo.Left} ", StringComparison.Ordinal));
        Assert.True(File.Exists(output));
        Assert.True(File.Exists(Path.Combine(demo.Folder, "cli-b.json")));
    }

    [Fact]
    public void AnOutputThatWouldReplaceTheBuildsSidecarIsRefused()
    {
        var before = File.ReadAllBytes(demo.Paths.Sidecar);
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", demo.Paths.Volume);
        Assert.Equal(1, code);
        Assert.Contains("would replace the build's sidecar", err);
        Assert.Equal(before, File.ReadAllBytes(demo.Paths.Sidecar));
    }

    [Fact]
    public void ImagesOfOtherSectionsAreRefused()
    {
        var other = Path.Combine(demo.Folder, "other-sections");
        Directory.CreateDirectory(other);
        File.Copy(Directory.GetFiles(demo.SeriesA, "*.png")[0], Path.Combine(other, "section_900.png"), overwrite: true);
        var output = Path.Combine(demo.Folder, "other.nii.gz");

        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", other, "--pixel-size", "20", "-o", output);

        Assert.Equal(1, code);
        var line = Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.Contains("none of its sections has a placement in a.json", line);
        Assert.False(File.Exists(output));
    }

    [Theory]
    [InlineData("--pixel-size", "abc", 2)]
    [InlineData("--pixel-size", "-3", 1)]
    [InlineData("--channel", "purple", 1)]
    [InlineData("--output-pixel-size", "0", 1)]
    [InlineData("--output-pixel-size", "-5", 1)]
    [InlineData("--output-pixel-size", "NaN", 1)]
    [InlineData("--output-pixel-size", "Infinity", 1)]
    [InlineData("--output-pixel-size", "0.01", 1)] // the build's grid at 0.01 µm: over NIfTI-1's 32767 voxels per axis
    [InlineData("--output-pixel-size", "five", 2)]
    [InlineData("--voxel-size", "0", 1)]
    [InlineData("--voxel-size", "0.01", 1)] // 0.01 µm in the plane as well, and over 32767 planes
    public void BadOptionValuesGiveTheREADMEsExitCode(string option, string value, int exit)
    {
        var output = Path.Combine(demo.Folder, "bad-option.nii.gz");
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", output, option, value);
        Assert.Equal(exit, code);
        Assert.StartsWith("error: ", err);
        var line = Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        if (exit == 1 && option.Contains("size", StringComparison.Ordinal)) Assert.Contains(option, line);
        Assert.False(File.Exists(output));
        Assert.False(File.Exists(Path.Combine(demo.Folder, "bad-option.json")));
    }

    [Fact]
    public void VoxelSizeSetsThePlaneSpacingAndTheInPlaneSizeAsBuildTakesIt()
    {
        var output = Path.Combine(demo.Folder, "voxel-25.nii.gz");
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", output, "--voxel-size", "25");
        Assert.True(code == 0, err);
        var header = StackBuild.Nifti.NiftiFile.ReadHeader(output);
        var (i, j, k) = header.Affine.VoxelSizes;
        Assert.Equal(0.025, i, 1e-7);
        Assert.Equal(0.025, j, 1e-7);
        Assert.Equal(0.025, k, 1e-7);
        // Planes 25 µm apart from the first section's to the last's (the demo's sections are 50 µm apart).
        int planes = demo.Build.Record.Sections.Max(s => s.ZIndex) + 1;
        Assert.Equal((planes - 1) * 2 + 1, header.Shape[2]);

        var tooMany = Path.Combine(demo.Folder, "planes-too-many.nii.gz");
        var (refused, _, message) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", tooMany,
            "--output-pixel-size", "20", "--voxel-size", "0.01");
        Assert.Equal(1, refused);
        var line = Assert.Single(message.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith("error: --voxel-size: ", line);
        Assert.Contains("more than NIfTI-1 stores (32767)", line);
        Assert.False(File.Exists(tooMany));
    }

    [Fact]
    public void AGridOverTheNiftiLimitSaysWhichSizeWouldDo()
    {
        var output = Path.Combine(demo.Folder, "too-fine.nii.gz");
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", output, "--output-pixel-size", "0.05");
        Assert.Equal(1, code);
        var line = Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith("error: --output-pixel-size: ", line);
        Assert.Contains("more than NIfTI-1 stores (32767 per axis)", line);
        Assert.Contains("give --output-pixel-size a size of at least", line);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void AMissingImageFolderIsRefused()
    {
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", Path.Combine(demo.Folder, "nowhere"), "-o", Path.Combine(demo.Folder, "n.nii.gz"));
        Assert.Equal(1, code);
        Assert.Contains("nowhere", err);
    }
}
