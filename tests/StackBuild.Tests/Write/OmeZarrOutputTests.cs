using System.Text;
using StackBuild.IO;
using StackBuild.Pipeline;
using StackBuild.Write;
using StackBuild.Zarr;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// An OME-Zarr output (<c>-o OUT.ome.zarr</c>) is a folder: it is staged under a hidden name and renamed into place with its
/// sidecar and report, so a failing write leaves no folder at the path; an earlier StackBuild image is replaced as an earlier
/// NIfTI volume is; any other folder or file at the path is refused. What python3-zarr reads from it is checked in
/// External/OmeZarrReaderTests.
/// </summary>
[Collection(ApplyDemoCollection.Name)]
public sealed class OmeZarrOutputTests(ApplyDemoFixture demo) : IDisposable
{
    private readonly string _folder = Directory.CreateTempSubdirectory("sb-omezarr-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_folder, true); } catch (IOException) { }
    }

    private BuildOutputPaths Paths => BuildOutputPaths.For(Path.Combine(_folder, "v.ome.zarr"));

    /// <summary>Everything in the test folder, hidden names included, as relative paths.</summary>
    private string[] Entries() => Directory.EnumerateFileSystemEntries(_folder, "*", SearchOption.AllDirectories)
        .Select(e => Path.GetRelativePath(_folder, e)).Order(StringComparer.Ordinal).ToArray();

    [Fact]
    public void TheSidecarNamesTheFolderAndItsChecksumAndApplyAcceptsIt()
    {
        var written = BuildWriter.Write(demo.Build, Paths);
        Assert.True(Directory.Exists(Paths.Volume));
        Assert.True(File.Exists(Paths.Sidecar) && File.Exists(Paths.Report));
        Assert.Equal("v.ome.zarr", written.Record.Volume);
        Assert.Equal(SidecarFile.Sha256(Paths.Volume), written.Record.VolumeSha256);
        Assert.DoesNotContain(Entries(), e => e.StartsWith('.')); // no staged folder or backup left beside the outputs
        // The commands that read a sidecar find the folder and check it (no "volume is not beside it" note).
        var notes = new StringWriter();
        SidecarFile.ReadWithVolume(Paths.Sidecar, notes);
        Assert.Equal("", notes.ToString());
    }

    [Fact]
    public void AChangedChunkIsRecognisedByTheSidecarsChecksum()
    {
        BuildWriter.Write(demo.Build, Paths);
        var chunk = Directory.EnumerateFiles(Path.Combine(Paths.Volume, "1"), "*", SearchOption.AllDirectories).First(f => !Path.GetFileName(f).StartsWith('.'));
        File.WriteAllBytes(chunk, [.. File.ReadAllBytes(chunk), 0]);
        var refusal = Assert.Throws<InputProblemException>(() => SidecarFile.ReadWithVolume(Paths.Sidecar, null));
        Assert.Contains("does not match it", refusal.Message);
    }

    [Fact]
    public void AFailingRenameLeavesNoFolderAtThePath()
    {
        // The sidecar is renamed last: by then the image folder is in place and must be taken back.
        var failure = Assert.Throws<IOException>(() => BuildWriter.Write(demo.Build, Paths, path =>
        {
            if (path == Paths.Sidecar) throw new IOException("simulated failure");
        }));
        Assert.Contains("could not be put in place", failure.Message);
        Assert.False(Path.Exists(Paths.Volume));
        Assert.Empty(Entries()); // nor the report, nor a staged .part folder
    }

    [Fact]
    public void AFailureWhileTheFolderIsWrittenLeavesNothing()
    {
        var path = Path.Combine(_folder, "w.ome.zarr");
        using var set = new OutputSet();
        var failure = Assert.Throws<IOException>(() => set.StageFolder(path, folder =>
        {
            File.WriteAllText(Path.Combine(folder, ".zgroup"), "{}");
            Directory.CreateDirectory(Path.Combine(folder, "0", "0"));
            throw new IOException("No space left on device");
        }));
        Assert.Contains("nothing was left at this path", failure.Message);
        Assert.Empty(Entries());
    }

    [Fact]
    public void AnEarlierImageIsReplacedAndKeptWhenTheNewSetFails()
    {
        BuildWriter.Write(demo.Build, Paths);
        string earlier = SidecarFile.Sha256(Paths.Volume), earlierSidecar = File.ReadAllText(Paths.Sidecar);
        Assert.True(OmeZarrOutput.IsStackBuildImage(Paths.Volume));

        // A failed second write restores the earlier image whole.
        Assert.Throws<IOException>(() => BuildWriter.Write(demo.Build with { InputBitDepth = 16 }, Paths, path =>
        {
            if (path == Paths.Sidecar) throw new IOException("simulated failure");
        }));
        Assert.Equal(earlier, SidecarFile.Sha256(Paths.Volume));
        Assert.Equal(earlierSidecar, File.ReadAllText(Paths.Sidecar));
        Assert.DoesNotContain(Entries(), e => e.StartsWith('.'));

        // A second write that succeeds replaces it (16-bit this time, so its chunks differ) and leaves no backup.
        var written = BuildWriter.Write(demo.Build with { InputBitDepth = 16 }, Paths);
        Assert.NotEqual(earlier, written.Record.VolumeSha256);
        Assert.Equal(written.Record.VolumeSha256, SidecarFile.Sha256(Paths.Volume));
        Assert.Contains("\"<u2\"", File.ReadAllText(Path.Combine(Paths.Volume, "0", ".zarray")));
        Assert.DoesNotContain(Entries(), e => e.StartsWith('.'));
    }

    [Fact]
    public void AFolderHoldingSomethingElseOrAFileAtThePathIsRefused()
    {
        Directory.CreateDirectory(Paths.Volume);
        Paths.CheckWritable(); // an empty folder is taken
        File.WriteAllText(Path.Combine(Paths.Volume, "notes.txt"), "mine");
        var refusal = Assert.Throws<InputProblemException>(() => BuildWriter.Write(demo.Build, Paths));
        Assert.Contains("holds something StackBuild did not write", refusal.Message);
        Assert.Equal("mine", File.ReadAllText(Path.Combine(Paths.Volume, "notes.txt")));

        // A Zarr group another program wrote (attributes without StackBuild's key) is not ours to replace either.
        File.Delete(Path.Combine(Paths.Volume, "notes.txt"));
        File.WriteAllText(Path.Combine(Paths.Volume, ".zgroup"), "{\"zarr_format\": 2}");
        File.WriteAllText(Path.Combine(Paths.Volume, ".zattrs"), "{\"multiscales\": []}");
        Assert.False(OmeZarrOutput.IsStackBuildImage(Paths.Volume));
        Assert.Throws<InputProblemException>(() => Paths.CheckWritable());

        Directory.Delete(Paths.Volume, recursive: true);
        File.WriteAllText(Paths.Volume, "a file");
        refusal = Assert.Throws<InputProblemException>(() => Paths.CheckWritable());
        Assert.Contains("an OME-Zarr output is a folder", refusal.Message);
        Assert.Equal("a file", File.ReadAllText(Paths.Volume));
    }

    [Theory]
    [InlineData("v.ome.zarr", "v.json")]
    [InlineData("v.OME.ZARR/", "v.json")] // a folder name as shell completion writes it
    [InlineData("a.b.ome.zarr", "a.b.json")]
    public void TheSidecarTakesTheBaseName(string name, string sidecar)
    {
        var paths = BuildOutputPaths.For(Path.Combine(_folder, name));
        Assert.True(paths.IsOmeZarr);
        Assert.Equal(Path.Combine(_folder, sidecar), paths.Sidecar);
    }

    [Fact]
    public void AZarrNameWithoutOmeIsRefused()
    {
        var refusal = Assert.Throws<InputProblemException>(() => BuildOutputPaths.For(Path.Combine(_folder, "v.zarr")));
        Assert.Contains("must end in .ome.zarr", refusal.Message);
    }
}

/// <summary>
/// The pyramid's levels (<see cref="OmeZarrLayout"/>): each halves the axes whose voxel is finer than twice the level's finest,
/// ⌈n/2⌉ voxels for n, until the larger side of the plane is at most 64 voxels. Expected values worked out by hand.
/// </summary>
public sealed class OmeZarrLayoutTests
{
    private static int[][] Shapes(OmeZarrLayout layout) => layout.Levels.Select(l => new[] { l.Nz, l.Ny, l.Nx }).ToArray();

    [Fact]
    public void AnAnisotropicVolumeIsFirstHalvedInThePlane()
    {
        // The demo's grid: 152 × 181 voxels of 20 µm, 60 planes 50 µm apart. 50 ≥ 2 × 20: z is kept at level 1; then
        // 50 < 2 × 40: every axis halves. 46 ≤ 64 ends the pyramid.
        var layout = OmeZarrLayout.For(152, 181, 60, 20, 20, 50);
        Assert.Equal([[60, 181, 152], [60, 91, 76], [30, 46, 38]], Shapes(layout));
        Assert.Equal([50.0, 40, 40], layout.Scale(layout.Levels[1]));
        Assert.Equal([0.0, 10, 10], layout.Translation(layout.Levels[1])); // the centre of level-0 voxels 0 and 1
        Assert.Equal([100.0, 80, 80], layout.Scale(layout.Levels[2]));
        Assert.Equal([25.0, 30, 30], layout.Translation(layout.Levels[2])); // 1.5 voxels of 20 µm; 0.5 of 50 µm
        Assert.Equal((4, 1, 1), layout.Levels[0].ChunkCounts); // 60 planes in chunks of 16 (the last holds 12); 181 × 152 in one
    }

    [Fact]
    public void CubicVoxelsHalveEveryAxisAndAThinStackKeepsItsPlane()
    {
        // 75 > 64 still asks for a level: 38 ends it.
        Assert.Equal([[100, 300, 200], [50, 150, 100], [25, 75, 50], [13, 38, 25]], Shapes(OmeZarrLayout.For(200, 300, 100, 1, 1, 1)));
        // One plane: z cannot halve; the plane does until 64.
        Assert.Equal([[1, 130, 129], [1, 65, 65], [1, 33, 33]], Shapes(OmeZarrLayout.For(129, 130, 1, 5, 5, 5)));
        // A volume whose plane is small from the start has one level.
        Assert.Single(OmeZarrLayout.For(64, 40, 500, 10, 10, 10).Levels);
    }
}
