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
    public void BadOptionValuesGiveTheREADMEsExitCode(string option, string value, int exit)
    {
        var output = Path.Combine(demo.Folder, "bad-option.nii.gz");
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesA, "-o", output, option, value);
        Assert.Equal(exit, code);
        Assert.StartsWith("error: ", err);
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
