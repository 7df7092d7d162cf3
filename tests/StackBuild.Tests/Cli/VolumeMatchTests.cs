using System.IO.Compression;
using System.Security.Cryptography;
using System.Text.Json;
using System.Text.Json.Nodes;
using StackBuild.Pipeline;
using StackBuild.Write;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>A small demo (8 sections of 64 px) built once, and a second build of it with other options.</summary>
public sealed class SmallBuildFixture : IDisposable
{
    public string Folder { get; } = Directory.CreateTempSubdirectory("sb-volume-match-").FullName;
    public string Series => Path.Combine(Folder, "series");
    public string Built => Path.Combine(Folder, "built");
    public string Other => Path.Combine(Folder, "other.nii.gz");

    public SmallBuildFixture()
    {
        Directory.CreateDirectory(Built);
        Run("demo", Series, "--sections", "8", "--size", "64", "--seed", "3");
        Run("build", Series, "-o", Path.Combine(Built, "v.nii.gz"), "--work-size", "64");
        Run("build", Series, "-o", Other, "--work-size", "64", "--fill", "none");
    }

    private static void Run(params string[] args)
    {
        var (code, _, err) = CliRun.Run(args);
        if (code != 0) throw new InvalidOperationException($"stackbuild {string.Join(' ', args)}: exit {code}: {err}");
    }

    public void Dispose()
    {
        try { Directory.Delete(Folder, true); } catch (IOException) { }
    }
}

/// <summary>
/// The sidecar names its volume and the volume's SHA-256: a volume swapped or changed after the build is refused by
/// info, evaluate, apply and points (one line, exit code 1, nothing written); the untouched set is accepted; a sidecar
/// without the checksum (written before it was recorded) is still read. A build whose writing fails leaves no new file.
/// </summary>
public sealed class VolumeMatchTests(SmallBuildFixture built, ITestOutputHelper log) : IClassFixture<SmallBuildFixture>, IDisposable
{
    private readonly string _work = Directory.CreateTempSubdirectory("sb-volume-match-run-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_work, true); } catch (IOException) { }
    }

    private string Volume => Path.Combine(_work, "v.nii.gz");
    private string Sidecar => Path.Combine(_work, "v.json");

    /// <summary>A copy of the built set in this test's own folder.</summary>
    private void CopySet()
    {
        foreach (var f in Directory.GetFiles(built.Built)) File.Copy(f, Path.Combine(_work, Path.GetFileName(f)));
    }

    /// <summary>The command's arguments, and the file it would write (null for info).</summary>
    private (string[] Args, string? Output) Command(string name)
    {
        switch (name)
        {
            case "info": return (["info", Volume], null);
            case "evaluate": return (["evaluate", Sidecar, "--truth", Path.Combine(built.Series, "truth.json")], null);
            case "apply":
                var applied = Path.Combine(_work, "applied.nii.gz");
                return (["apply", Sidecar, "--images", built.Series, "-o", applied], applied);
            default:
                using (var doc = JsonDocument.Parse(File.ReadAllText(Sidecar)))
                {
                    int placed = doc.RootElement.GetProperty("sections").EnumerateArray()
                        .First(s => s.GetProperty("status").GetString() == "aligned").GetProperty("number").GetInt32();
                    var marks = Path.Combine(_work, "marks.csv");
                    File.WriteAllText(marks, $"section,x,y\n{placed},10,12\n");
                }
                var mapped = Path.Combine(_work, "mapped.csv");
                return (["points", Sidecar, "--in", Path.Combine(_work, "marks.csv"), "-o", mapped], mapped);
        }
    }

    /// <summary>Rewrites the volume with one voxel changed: still a valid NIfTI-1 file, not the one built.</summary>
    private void ChangeOneVoxel()
    {
        byte[] raw;
        using (var input = new GZipStream(File.OpenRead(Volume), CompressionMode.Decompress))
        using (var buffer = new MemoryStream())
        {
            input.CopyTo(buffer);
            raw = buffer.ToArray();
        }
        raw[^1] ^= 0x10; // the last voxel
        using var output = new GZipStream(File.Create(Volume), CompressionLevel.Optimal);
        output.Write(raw);
    }

    [Theory]
    [InlineData("info", "swapped")]
    [InlineData("info", "changed")]
    [InlineData("evaluate", "swapped")]
    [InlineData("evaluate", "changed")]
    [InlineData("apply", "swapped")]
    [InlineData("apply", "changed")]
    [InlineData("points", "swapped")]
    [InlineData("points", "changed")]
    public void AVolumeThatNoLongerMatchesItsSidecarIsRefused(string name, string how)
    {
        CopySet();
        var (args, output) = Command(name);
        var (okCode, _, okErr) = CliRun.Run(args); // the set as built is accepted
        Assert.True(okCode == 0, okErr);
        if (output is not null) File.Delete(output);
        foreach (var f in Directory.GetFiles(_work, "applied.json")) File.Delete(f);

        if (how == "swapped") File.Copy(built.Other, Volume, overwrite: true);
        else ChangeOneVoxel();
        var sidecarBefore = File.ReadAllBytes(Sidecar);
        var (code, stdout, stderr) = CliRun.Run(args);
        log.WriteLine($"{name}, {how}: exit {code}: {stderr.Trim()}");

        Assert.Equal(1, code);
        var line = Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries));
        Assert.StartsWith($"error: {(name == "info" ? Volume : Sidecar)}: ", line);
        Assert.Contains("does not match", line);
        Assert.Contains(" — build again to write a matching volume and sidecar", line);
        Assert.Equal("", stdout);
        if (output is not null) Assert.False(File.Exists(output), $"{output} was written");
        Assert.Equal(sidecarBefore, File.ReadAllBytes(Sidecar));
    }

    [Theory]
    [InlineData("info")]
    [InlineData("evaluate")]
    [InlineData("apply")]
    [InlineData("points")]
    public void ASidecarWithoutTheChecksumIsStillRead(string name)
    {
        CopySet();
        var json = JsonNode.Parse(File.ReadAllText(Sidecar))!.AsObject();
        Assert.True(json.Remove("volume") && json.Remove("volume_sha256"));
        File.WriteAllText(Sidecar, json.ToJsonString());
        ChangeOneVoxel(); // nothing to check it against
        var (code, _, stderr) = CliRun.Run(Command(name).Args);
        Assert.True(code == 0, stderr);
        Assert.Equal("", stderr);
    }

    [Theory]
    [InlineData("evaluate")]
    [InlineData("apply")]
    [InlineData("points")]
    public void AMissingVolumeIsNotedAndThePlacementsAreUsed(string name)
    {
        CopySet();
        File.Delete(Volume);
        var (code, _, stderr) = CliRun.Run(Command(name).Args);
        Assert.True(code == 0, stderr);
        var line = Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith($"warning: {Sidecar}: the volume it was written with (v.nii.gz) is not beside it", line);
    }

    [Fact]
    public void TheSidecarNamesTheVolumeAndItsChecksum()
    {
        var sidecar = Path.Combine(built.Built, "v.json");
        using var doc = JsonDocument.Parse(File.ReadAllText(sidecar));
        Assert.Equal("v.nii.gz", doc.RootElement.GetProperty("volume").GetString());
        var expected = Convert.ToHexStringLower(SHA256.HashData(File.ReadAllBytes(Path.Combine(built.Built, "v.nii.gz"))));
        Assert.Equal(expected, doc.RootElement.GetProperty("volume_sha256").GetString());
        Assert.Contains(expected, File.ReadAllText(Path.Combine(built.Built, "v.report.html")));
        // The reader the commands use still reads it, fields and all.
        Assert.Equal(expected, SidecarFile.Read(sidecar).VolumeSha256);
    }

    [Theory]
    [InlineData(false)]
    [InlineData(true)]
    public void ABuildWhoseLastRenameFailsLeavesTheOutputsAsTheyWere(bool earlierSet)
    {
        if (earlierSet) CopySet();
        var before = Snapshot();
        var result = BuildReview.Review(BuildPipeline.Run(new BuildOptions { Input = built.Series, Fill = StackBuild.Render.GapFill.Linear }));
        var paths = BuildOutputPaths.For(Volume);
        var e = Assert.Throws<IOException>(() => BuildWriter.Write(result, paths,
            path => { if (path == paths.Sidecar) throw new IOException("simulated failure"); }));
        Assert.StartsWith($"{paths.Sidecar}: could not be put in place", e.Message);
        Assert.Equal(before, Snapshot()); // no new file at any output path (the earlier set byte for byte), no temporary file
        // The same build without the failure writes the set, and its sidecar matches its volume.
        BuildWriter.Write(result, paths);
        Assert.Equal(0, CliRun.Run("info", Volume).Code);
        Assert.Equal(3, Directory.GetFiles(_work).Length);
    }

    [Fact]
    public void ABuildThatFillsTheDiskPartWayLeavesNoFile()
    {
        // The volume (about 10 KB) fits in 64 KB; the report (about 200 KB), written next, does not.
        var small = Directory.CreateDirectory(Path.Combine(_work, "small disk")).FullName;
        var (mounted, _, why) = NiftiPython.Process("mount", ["-t", "tmpfs", "-o", "size=64k", "tmpfs", small]);
        Assert.True(mounted == 0, $"mount -t tmpfs failed ({why.Trim()}): this test makes a small file system and needs root");
        try
        {
            var output = Path.Combine(small, "v.nii.gz");
            var (code, _, stderr) = CliRun.Run("build", built.Series, "-o", output, "--work-size", "64");
            log.WriteLine(stderr);
            Assert.Equal(3, code);
            var line = Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries),
                l => l.StartsWith("error: ", StringComparison.Ordinal));
            Assert.Contains(Path.Combine(small, "v.report.html") + ": could not be written (No space left on device)", line);
            // Not the volume, not a temporary file: only the pairs the build registered, kept for the run after space is freed
            // (README, "Registered pairs are kept").
            Assert.Equal([PairCacheFolder.DefaultName], Directory.GetFileSystemEntries(small).Select(Path.GetFileName));
            Assert.Empty(Directory.GetFiles(Path.Combine(small, PairCacheFolder.DefaultName), ".*")); // no temporary file in it either
        }
        finally
        {
            NiftiPython.Process("umount", [small]);
        }
    }

    private SortedDictionary<string, string> Snapshot() =>
        new(Directory.GetFiles(_work).ToDictionary(f => Path.GetFileName(f), f => Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(f)))),
            StringComparer.Ordinal);
}
