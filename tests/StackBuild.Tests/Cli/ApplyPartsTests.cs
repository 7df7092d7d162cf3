using System.IO.Compression;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// <c>apply --sections</c> and <c>merge</c>: parts rendered apart and put together give the whole run's volume byte for byte;
/// parts that overlap, leave sections out or come from other options are refused in one line.
/// </summary>
[Collection(ApplyDemoCollection.Name)]
public sealed class ApplyPartsTests(ApplyDemoFixture demo)
{
    private string Out(string name) => Path.Combine(demo.Folder, name);

    /// <summary>Channel B (16-bit, twice the pixel count, one placed section's image missing) on a finer grid and another
    /// plane spacing, so gap filling and resampling along the stack both cross the parts' borders.</summary>
    private static readonly string[] Options = ["--pixel-size", "10", "--output-pixel-size", "15", "--voxel-size", "30"];

    private void Apply(string output, params string[] extra)
    {
        var (code, _, err) = CliRun.Run(["apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "-o", Out(output), .. Options, .. extra]);
        Assert.True(code == 0, err);
    }

    private static byte[] Unzipped(string path)
    {
        using var gz = new GZipStream(File.OpenRead(path), CompressionMode.Decompress);
        using var memory = new MemoryStream();
        gz.CopyTo(memory);
        return memory.ToArray();
    }

    [Fact]
    public void PartsMergedGiveTheWholeRunsVolumeByteForByte()
    {
        int left = demo.Left; // no channel-B image: its plane is filled from planes in the two parts around it
        Apply("parts-whole.nii.gz");
        Apply("parts-a.nii.gz", "--sections", $"1-{left - 1}");
        Apply("parts-b.nii.gz", "--sections", $"{left}-{left + 4}");
        Apply("parts-c.nii.gz", "--sections", $"{left + 5}-999");

        var (code, stdout, err) = CliRun.Run("merge", Out("parts-c.json"), Out("parts-a.json"), Out("parts-b.json"), "-o", Out("parts-merged.nii.gz"));
        Assert.True(code == 0, err);
        Assert.Contains("Parts    3", stdout);

        var whole = Unzipped(Out("parts-whole.nii.gz"));
        var merged = Unzipped(Out("parts-merged.nii.gz"));
        Assert.True(whole.Length > 352 + 100_000, $"{whole.Length} bytes");
        Assert.Equal(whole, merged); // header and voxels
        // The sidecars agree but for the time and the file's own name and checksum.
        static string Masked(string path) => string.Join("\n", File.ReadAllLines(path).Where(l => !l.Contains("\"created\"") && !l.Contains("\"volume")));
        Assert.Equal(Masked(Out("parts-whole.json")), Masked(Out("parts-merged.json")));
        Assert.Contains($"\"filled_from\"", File.ReadAllText(Out("parts-merged.json")));
    }

    [Fact]
    public void OverlappingMissingAndMismatchedPartsAreRefusedInOneLine()
    {
        Apply("refuse-a.nii.gz", "--sections", "1-12");
        Apply("refuse-b.nii.gz", "--sections", "10-999");
        Apply("refuse-c.nii.gz", "--sections", "14-999");
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "-o", Out("refuse-d.nii.gz"),
            "--pixel-size", "10", "--sections", "13-13");
        Assert.True(code == 0, err);

        foreach (var (parts, words) in new[]
        {
            (new[] { "refuse-a.json", "refuse-b.json" }, "its sections 10–12 are also in refuse-a.json: the parts overlap"),
            (new[] { "refuse-a.json", "refuse-c.json" }, "sections 13 of the build are in none of the 2 parts given"),
            (new[] { "refuse-a.json", "refuse-d.json", "refuse-c.json" }, "it was rendered with other apply options than refuse-a.json"),
        })
        {
            var output = Out("refused.nii.gz");
            (code, _, err) = CliRun.Run(["merge", .. parts.Select(Out), "-o", output]);
            Assert.Equal(1, code);
            var line = Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries));
            Assert.Contains(words, line);
            Assert.False(File.Exists(output));
        }
    }

    [Fact]
    public void ABadRangeAndAWholeVolumeGivenAsAPartAreRefused()
    {
        var (code, _, err) = CliRun.Run("apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "-o", Out("range.nii.gz"), "--sections", "9-3");
        Assert.Equal(1, code);
        Assert.Contains("--sections '9-3' is not a range of section numbers", err);
        (code, _, err) = CliRun.Run("merge", demo.Paths.Sidecar, "-o", Out("not-parts.nii.gz"));
        Assert.Equal(1, code);
        Assert.Contains("not a part of an applied volume", Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries)));
    }

    [Fact]
    public void APartIsNiftiAndMergeWritesTheWholeVolumeAsOmeZarr()
    {
        // A part named .ome.zarr is refused in one line with nothing written; merge of NIfTI parts may write .ome.zarr.
        var (code, _, err) = CliRun.Run(["apply", demo.Paths.Sidecar, "--images", demo.SeriesB, "-o", Out("zpart.ome.zarr"), .. Options, "--sections", "1-20"]);
        Assert.Equal(1, code);
        Assert.Contains("a part (apply --sections) is written as NIfTI-1 only", Assert.Single(err.Split('\n', StringSplitOptions.RemoveEmptyEntries)));
        Assert.False(Directory.Exists(Out("zpart.ome.zarr")) || File.Exists(Out("zpart.ome.zarr")) || File.Exists(Out("zpart.json")));
        Apply("zparts-a.nii.gz", "--sections", "1-20");
        Apply("zparts-b.nii.gz", "--sections", "21-999");
        (code, _, err) = CliRun.Run("merge", Out("zparts-a.json"), Out("zparts-b.json"), "-o", Out("zmerged.ome.zarr"));
        Assert.True(code == 0, err);
        Assert.True(File.Exists(Path.Combine(Out("zmerged.ome.zarr"), ".zattrs")));
        Assert.Contains("zmerged.ome.zarr", File.ReadAllText(Out("zmerged.json")));
    }
}
