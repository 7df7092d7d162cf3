using System.Text.Json;
using StackBuild.Write;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// A test that reads OME-Zarr with Debian's python3-zarr: skipped, with the reason and the package to install, on a machine
/// without it; in CI (<c>CI=true</c>, where tests/run.sh installs the package) it runs, and fails naming the package if the
/// install step is missing, so a skip cannot hide it there.
/// </summary>
public sealed class ZarrReaderFactAttribute : FactAttribute
{
    private static readonly Lazy<bool> Available = new(() =>
        File.Exists(NiftiPython.Python) && NiftiPython.Process(NiftiPython.Python, ["-c", "import zarr, numcodecs, nibabel"]).Exit == 0);

    public ZarrReaderFactAttribute()
    {
        if (Environment.GetEnvironmentVariable("CI") != "true" && !Available.Value)
            Skip = "python3-zarr (or python3-nibabel) is not installed for /usr/bin/python3: apt-get install -y python3-zarr python3-nibabel (tests/run.sh does this as root)";
    }
}

/// <summary>
/// `-o OUT.ome.zarr` read by outside readers: Debian's python3-zarr 2.13 (Zarr v2 with numcodecs' zlib) for the image,
/// nibabel for the NIfTI volume of the same build, hashlib for the sidecar's folder checksum, and the OME-NGFF 0.4
/// specification's MUST rules for the "multiscales" metadata, checked by hand in tests/tools/zarr_check.py. Axis order: the
/// Zarr arrays are (z, y, x) with x fastest, NIfTI's (i, j, k) with i fastest; array[z, y, x] = nifti[x, y, z].
/// </summary>
[Collection(ApplyDemoCollection.Name)]
public sealed class OmeZarrReaderTests(ApplyDemoFixture demo)
{
    // The NIfTI sform and pixdim are float32: nibabel's zooms and affine agree with the exact values to about 1e-6 relative.
    private const double Float32Relative = 1e-6;

    private static JsonElement Check(string image, string nifti) =>
        JsonDocument.Parse(PythonTool.RunZarr("zarr_check.py", image, nifti)).RootElement;

    [ZarrReaderFact]
    public void ABuildsImageHoldsItsNiftiVolumeAndBlockMeanLevels()
    {
        // The command line builds the fixture's series again (same process, same FFT plans: the same volume as the fixture's
        // a.nii.gz, BuildDeterminismTests) to an OME-Zarr image.
        var folder = Directory.CreateDirectory(Path.Combine(demo.Folder, "zarr-build")).FullName;
        var output = Path.Combine(folder, "a.ome.zarr");
        var (code, stdout, err) = CliRun.Run("build", demo.SeriesA, "-o", output);
        Assert.True(code == 0, err);
        Assert.Contains($"Volume   {output}", stdout);
        var result = Check(output, demo.Paths.Volume);

        // python3-zarr reads level 0 as the NIfTI voxel data transposed (k, j, i), same dtype (uint8: an 8-bit series).
        Assert.True(result.GetProperty("level0_equals_nifti").GetBoolean(), "level 0 differs from the NIfTI volume (python3-zarr vs nibabel)");
        Assert.True(result.GetProperty("level0_dtype_matches").GetBoolean());
        AssertLevels(result, "uint8");

        // The sidecar records the folder and the checksum of its files, as hashlib computes it (SidecarFile.Sha256's rule).
        var sidecar = JsonDocument.Parse(File.ReadAllText(Path.Combine(folder, "a.json"))).RootElement;
        Assert.Equal("a.ome.zarr", sidecar.GetProperty("volume").GetString());
        Assert.Equal(result.GetProperty("tree_sha256").GetString(), sidecar.GetProperty("volume_sha256").GetString());
    }

    [ZarrReaderFact]
    public void AnAppliedSixteenBitImageHoldsItsNiftiVolume()
    {
        // Channel B of the fixture is 16-bit: apply writes it to both forms; the image must hold the NIfTI's uint16 values.
        var folder = Directory.CreateDirectory(Path.Combine(demo.Folder, "zarr-apply")).FullName;
        var nifti = Path.Combine(folder, "b.nii.gz");
        var image = Path.Combine(folder, "b-zarr.ome.zarr");
        foreach (var output in new[] { nifti, image })
        {
            var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "--pixel-size", "10", "-o", output);
            Assert.True(code == 0, err);
        }
        var result = Check(image, nifti);
        Assert.True(result.GetProperty("level0_equals_nifti").GetBoolean(), "level 0 differs from the applied NIfTI volume");
        Assert.True(result.GetProperty("level0_dtype_matches").GetBoolean());
        AssertLevels(result, "uint16");
        var sidecar = JsonDocument.Parse(File.ReadAllText(Path.Combine(folder, "b-zarr.json"))).RootElement;
        Assert.Equal(result.GetProperty("tree_sha256").GetString(), sidecar.GetProperty("volume_sha256").GetString());
    }

    [ZarrReaderFact]
    public void TheCheckFindsALevelThatIsNotTheMean()
    {
        // The control: the same check on an image whose level 1 was overwritten (a chunk of zeros of the right size, written by
        // python3-zarr itself) must report mismatches, and against another volume level 0 must differ.
        var folder = Directory.CreateDirectory(Path.Combine(demo.Folder, "zarr-control")).FullName;
        var image = Path.Combine(folder, "c.ome.zarr");
        BuildWriter.Write(demo.Build, BuildOutputPaths.For(image));
        PythonTool.RunZarrCode($"import zarr; a = zarr.open_array('{image}/1', mode='r+'); a[0, :8, :8] = 0");
        var result = Check(image, demo.Paths.Volume);
        Assert.True(result.GetProperty("level0_equals_nifti").GetBoolean());
        var level1 = result.GetProperty("levels")[1];
        Assert.True(level1.GetProperty("mean_mismatches").GetInt32() > 0, "the check did not notice a level that is not the block mean");

        var other = Path.Combine(folder, "other.nii.gz");
        Assert.Equal(0, CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "--pixel-size", "10", "-o", other).Code);
        Assert.False(Check(image, other).GetProperty("level0_equals_nifti").GetBoolean());
    }

    [ZarrReaderFact]
    public void SeveralChunksAndOddEdgesReadBackExactly()
    {
        // 300 × 270 voxels in a plane (two chunks of 256 each way, the second mostly padding), 20 planes (a chunk of 16 and
        // one of 4), cubic voxels so z halves too, odd sizes at coarser levels (135, 5) whose last block holds one voxel; random
        // 16-bit values over the whole range and one not-a-number (stored as 0 by both writers).
        var volume = new Imaging.Volume(300, 270, 20, Geometry.Affine.FromRows([-0.01, 0, 0, 1.5], [0, 0, 0.01, -2], [0, -0.01, 0, 0.25]));
        var rng = new Random(5);
        for (int n = 0; n < volume.Voxels.Length; n++) volume.Voxels[n] = rng.Next(65536);
        volume.Voxels[12345] = float.NaN;
        var folder = Directory.CreateDirectory(Path.Combine(demo.Folder, "zarr-chunks")).FullName;
        var nifti = Path.Combine(folder, "r.nii");
        Nifti.NiftiFile.Write(nifti, volume, new Nifti.NiftiWriteOptions { DataType = Nifti.NiftiDataType.UInt16 });
        var image = Directory.CreateDirectory(Path.Combine(folder, "r.ome.zarr")).FullName;
        Zarr.OmeZarrWriter.Write(image, volume, Zarr.ZarrElementType.UInt16, "r", "random");

        var result = Check(image, nifti);
        Assert.True(result.GetProperty("level0_equals_nifti").GetBoolean(), "level 0 differs from the NIfTI volume");
        Assert.Empty(result.GetProperty("metadata_problems").EnumerateArray());
        Assert.Empty(result.GetProperty("translation_problems").EnumerateArray());
        var levels = result.GetProperty("levels").EnumerateArray().ToArray();
        Assert.Equal([[20, 270, 300], [10, 135, 150], [5, 68, 75], [3, 34, 38]],
            levels.Select(l => l.GetProperty("shape").EnumerateArray().Select(v => v.GetInt32()).ToArray()));
        for (int l = 1; l < levels.Length; l++)
            Assert.True(levels[l].GetProperty("mean_mismatches").GetInt32() == 0, $"level {l} is not the block mean of level {l - 1}");
    }

    private static void AssertLevels(JsonElement result, string dtype)
    {
        // OME-NGFF 0.4, "multiscales": version, axes, datasets[].path, one scale first and at most one translation after it,
        // vectors as long as the axes, datasets from the largest array (zarr_check.py lists what it checks).
        Assert.Empty(result.GetProperty("metadata_problems").EnumerateArray());
        Assert.Equal(["z", "y", "x"], result.GetProperty("axis_names").EnumerateArray().Select(a => a.GetString()));
        Assert.All(result.GetProperty("axis_units").EnumerateArray(), u => Assert.Equal("micrometer", u.GetString()));
        // Each level's voxel 0 centred on the level-0 voxels it averages (the geometry of block means).
        Assert.Empty(result.GetProperty("translation_problems").EnumerateArray());

        var levels = result.GetProperty("levels").EnumerateArray().ToArray();
        Assert.True(levels.Length >= 2, "no coarser level");
        // Level 0's scale (z, y, x) is the NIfTI's voxel size (nibabel zooms, i j k) reversed.
        var zooms = result.GetProperty("nifti_zooms_um").EnumerateArray().Select(v => v.GetDouble()).ToArray();
        var scale0 = levels[0].GetProperty("scale").EnumerateArray().Select(v => v.GetDouble()).ToArray();
        for (int a = 0; a < 3; a++) Assert.Equal(zooms[2 - a], scale0[a], zooms[2 - a] * Float32Relative);
        // The image carries the NIfTI affine (nibabel's, float32) as its own copy.
        var nib = NiftiPython.Matrix(result.GetProperty("nifti_affine"));
        var own = NiftiPython.Matrix(result.GetProperty("stackbuild_affine"));
        for (int r = 0; r < 4; r++) for (int c = 0; c < 4; c++) Assert.Equal(nib[r][c], own[r][c], 1e-6);

        foreach (var level in levels)
        {
            Assert.Equal(dtype, level.GetProperty("dtype").GetString());
            Assert.Equal("zlib", level.GetProperty("compressor").GetString()); // numcodecs' own codec, no plugin
            Assert.Equal("/", level.GetProperty("dimension_separator").GetString()); // OME-NGFF: nested chunk folders
        }
        bool planeOnlySeen = false;
        for (int l = 1; l < levels.Length; l++)
        {
            // Each coarser level is the rounded block mean of the one before it, as python computes it from the stored arrays.
            Assert.True(levels[l].GetProperty("mean_mismatches").GetInt32() == 0,
                $"level {l}: {levels[l].GetProperty("mean_mismatches").GetInt32()} voxels differ from the block mean (up to {levels[l].GetProperty("mean_max_difference")})");
            var f = levels[l].GetProperty("factors").EnumerateArray().Select(v => v.GetInt32()).ToArray();
            var before = levels[l - 1].GetProperty("factors").EnumerateArray().Select(v => v.GetInt32()).ToArray();
            Assert.All(f.Zip(before), p => Assert.True(p.First == p.Second || p.First == 2 * p.Second, $"level {l}: factor {p.First} after {p.Second}"));
            planeOnlySeen |= f[0] == before[0] && f[1] == 2 * before[1];
        }
        // The demo's voxels are 20 × 20 × 50 µm: its first coarser level halves the plane only (the layout's rule).
        Assert.True(planeOnlySeen, "no level halved the plane alone, though the planes lie 2.5 voxels apart");
    }
}
