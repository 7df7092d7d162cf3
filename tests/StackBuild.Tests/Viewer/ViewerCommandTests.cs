using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Viewer;
using Xunit;

namespace StackBuild.Tests;

/// <summary><c>stackbuild view --overlay/--labels</c>: bad overlay files are one-line errors; which overlays are taken for labels.</summary>
public sealed class ViewerCommandTests(NiftiTempFolder temp) : IClassFixture<NiftiTempFolder>
{
    private readonly string _folder = temp.Path;

    [Theory]
    [InlineData("--overlay", "absent.nii.gz", "no such file")]
    [InlineData("--labels", "absent.nii.gz", "no such file")]
    [InlineData("--overlay", "text.nii", "not a NIfTI-1 file")]
    [InlineData("--overlay", "text.nii.gz", "NIfTI")]
    public void ABadOverlayIsAOneLineErrorNamingTheFile(string option, string name, string problem)
    {
        var volume = ResliceTestSupport.WriteNifti(ResliceTestSupport.Phantom(20, 16, 6), _folder);
        File.WriteAllText(Path.Combine(_folder, "text.nii"), "this is not an image\n");
        File.WriteAllText(Path.Combine(_folder, "text.nii.gz"), "neither is this\n");
        var (exit, stdout, stderr) = ResliceTestSupport.Cli("view", volume, option, Path.Combine(_folder, name), "--port", "0");
        Assert.Equal(1, exit);
        Assert.Single(stderr.TrimEnd().Split('\n'));
        Assert.Contains(name, stderr);
        Assert.Contains(problem, stderr);
        Assert.DoesNotContain("viewing", stdout); // refused before any server started
    }

    [Fact]
    public void LabelsAreRecognisedByIntentOrByFewIntegerValues()
    {
        var grid = Affine.FromAxes(AxisCodes.Default, 0.1, 0.1, 0.1, 8, 8, 8);
        var regions = new Volume(8, 8, 8, grid);
        for (int p = 0; p < regions.Voxels.Length; p++) regions.Voxels[p] = p % 5;
        var image = new Volume(8, 8, 8, grid);
        for (int p = 0; p < image.Voxels.Length; p++) image.Voxels[p] = p % 200;
        Assert.True(ViewerOverlay.LooksLikeLabels(regions, integerStorage: true, intentCode: 0));
        Assert.False(ViewerOverlay.LooksLikeLabels(regions, integerStorage: false, intentCode: 0)); // stored as floats: intensities
        Assert.False(ViewerOverlay.LooksLikeLabels(image, integerStorage: true, intentCode: 0));   // 200 grey levels: an image
        Assert.True(ViewerOverlay.LooksLikeLabels(image, integerStorage: false, intentCode: 1002)); // NIFTI_INTENT_LABEL (nifti1.h)
    }
}

/// <summary>The viewer names the section at each plane from the build's sidecar beside the volume.</summary>
public sealed class ViewerSidecarTests(BuildReportFixture fixture) : IClassFixture<BuildReportFixture>
{
    [Fact]
    public void SectionNumbersComeFromTheSidecarBesideTheVolume()
    {
        var volume = StackBuild.Nifti.NiftiFile.Read(fixture.Paths.Volume).ToVolume();
        var notes = new StringWriter();
        var sections = ViewerSection.FromSidecar(fixture.Paths.Volume, volume, notes);
        Assert.NotNull(sections);
        // Read the sidecar as plain JSON (its documented fields: number, status, z_index, filled), not through BuildRecord.
        using var json = System.Text.Json.JsonDocument.Parse(File.ReadAllText(fixture.Paths.Sidecar));
        var expected = json.RootElement.GetProperty("sections").EnumerateArray().Select(s => (
            K: s.GetProperty("z_index").GetInt32(), Number: s.GetProperty("number").GetInt32(),
            Status: s.GetProperty("status").GetString() + (s.TryGetProperty("filled", out var f) && f.ValueKind == System.Text.Json.JsonValueKind.String ? ", filled" : ""))).ToList();
        Assert.Equal(expected, sections!.Select(s => (s.PlaneIndex, s.Number, s.Status)).ToList());
        Assert.Contains(sections!, s => s.Status.StartsWith("gap", StringComparison.Ordinal)); // gaps are named too
        Assert.Equal("", notes.ToString());

        // A volume of another grid next to that sidecar: no numbers, and a note saying why.
        var other = new Volume(volume.Nx + 1, volume.Ny, volume.Nz, volume.Affine);
        Assert.Null(ViewerSection.FromSidecar(fixture.Paths.Volume, other, notes));
        Assert.Contains("another grid", notes.ToString());
    }
}
