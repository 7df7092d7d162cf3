using System.Security.Cryptography;
using System.Text;
using StackBuild.IO;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// <see cref="OutputSet"/>: files put in place together or not at all. A failure while a file is written or while the files
/// are renamed must leave the output paths as they were (nothing new; an earlier set byte for byte) and no temporary file.
/// </summary>
public sealed class OutputSetTests : IDisposable
{
    private readonly string _folder = Directory.CreateTempSubdirectory("sb-outputset-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_folder, true); } catch (IOException) { }
    }

    private string[] Paths => [Path.Combine(_folder, "v.nii"), Path.Combine(_folder, "v.report.html"), Path.Combine(_folder, "v.json")];

    private static Action<Stream> Text(string text) => s => s.Write(Encoding.UTF8.GetBytes(text));

    private SortedDictionary<string, string> Snapshot() =>
        new(Directory.GetFiles(_folder).ToDictionary(f => Path.GetFileName(f), f => Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(f)))),
            StringComparer.Ordinal);

    private void WriteOldSet()
    {
        foreach (var p in Paths) File.WriteAllText(p, "old " + Path.GetFileName(p));
    }

    [Fact]
    public void StagingRemovesWhatAKilledRunLeftForThatOutputOnly()
    {
        // A process id that runs (1, init) and one that does not (the highest id Linux allows, 2^22, is never given out).
        const int alive = 1, gone = 4194304;
        Assert.True(Directory.Exists($"/proc/{alive}") && !Directory.Exists($"/proc/{gone}"));
        string Guid32() => Guid.NewGuid().ToString("N");
        var stale = new[] { $".v.nii.{gone}.{Guid32()}.part", $".stackbuild-write-check.{gone}.{Guid32()}" };
        var kept = new[]
        {
            $".v.nii.{alive}.{Guid32()}.part",      // another build, still running, writes the same output
            $".v.nii.{gone}.{Guid32()}.old",        // an earlier output's only copy, after a kill between renames
            $".w.nii.{gone}.{Guid32()}.part",       // another output's leftover: not this set's to judge
            ".v.nii.notes",                         // not a temporary name at all
        };
        foreach (var f in stale.Concat(kept)) File.WriteAllText(Path.Combine(_folder, f), "x");
        using (var set = new OutputSet())
        {
            set.Stage(Paths[0], Text("new"));
            set.Commit();
        }
        var now = Directory.GetFiles(_folder).Select(Path.GetFileName).ToHashSet();
        Assert.All(stale, f => Assert.DoesNotContain(f, now));
        Assert.All(kept, f => Assert.Contains(f, now));
        Assert.Contains("v.nii", now);
    }

    [Fact]
    public void StagingAFolderRemovesTheFolderAKilledRunLeftForThatOutput()
    {
        const int alive = 1, gone = 4194304; // as in the test above
        string Guid32() => Guid.NewGuid().ToString("N");
        var stale = Path.Combine(_folder, $".v.ome.zarr.{gone}.{Guid32()}.part");
        var running = Path.Combine(_folder, $".v.ome.zarr.{alive}.{Guid32()}.part");
        foreach (var f in new[] { stale, running })
        {
            Directory.CreateDirectory(Path.Combine(f, "0", "0"));
            File.WriteAllText(Path.Combine(f, "0", "0", "0"), "chunk");
        }
        var output = Path.Combine(_folder, "v.ome.zarr");
        using (var set = new OutputSet())
        {
            set.StageFolder(output, folder => File.WriteAllText(Path.Combine(folder, ".zgroup"), "{}"));
            set.Commit();
        }
        Assert.False(Directory.Exists(stale));
        Assert.True(Directory.Exists(running)); // another build still writing the same output
        Assert.Equal("{}", File.ReadAllText(Path.Combine(output, ".zgroup")));
    }

    [Fact]
    public void AllFilesAppearOnCommitAndNoneBefore()
    {
        using var set = new OutputSet();
        foreach (var p in Paths) set.Stage(p, Text("new " + Path.GetFileName(p)));
        Assert.All(Paths, p => Assert.False(File.Exists(p)));
        Assert.Equal(3, Directory.GetFiles(_folder, "*.part").Length); // the staged files, hidden beside the outputs
        set.Commit();
        Assert.All(Paths, p => Assert.Equal("new " + Path.GetFileName(p), File.ReadAllText(p)));
        Assert.Equal(Paths.Select(p => Path.GetFileName(p)).Order(StringComparer.Ordinal), Snapshot().Keys); // no temporary or backup left
    }

    [Fact]
    public void ACommitReplacesAnEarlierSetAndRemovesTheBackups()
    {
        WriteOldSet();
        using (var set = new OutputSet())
        {
            foreach (var p in Paths) set.Stage(p, Text("new " + Path.GetFileName(p)));
            set.Commit();
        }
        Assert.All(Paths, p => Assert.Equal("new " + Path.GetFileName(p), File.ReadAllText(p)));
        Assert.Equal(3, Directory.GetFiles(_folder).Length);
    }

    [Theory]
    [InlineData(0)]
    [InlineData(1)]
    [InlineData(2)]
    public void ARenameFailingPartWayLeavesNothingNew(int failing)
    {
        var before = Snapshot();
        var set = new OutputSet(path => { if (path == Paths[failing]) throw new IOException("simulated failure"); });
        foreach (var p in Paths) set.Stage(p, Text("new"));
        var e = Assert.Throws<IOException>(set.Commit);
        set.Dispose();
        Assert.StartsWith(Paths[failing] + ": could not be put in place (simulated failure)", e.Message);
        Assert.Equal(before, Snapshot()); // empty: no output, no .part, no backup
        Assert.Empty(Directory.GetFiles(_folder));
    }

    [Theory]
    [InlineData(0)]
    [InlineData(1)]
    [InlineData(2)]
    public void ARenameFailingPartWayRestoresTheEarlierSet(int failing)
    {
        WriteOldSet();
        var before = Snapshot();
        using var set = new OutputSet(path => { if (path == Paths[failing]) throw new IOException("simulated failure"); });
        foreach (var p in Paths) set.Stage(p, Text("new"));
        Assert.Throws<IOException>(set.Commit);
        Assert.Equal(before, Snapshot()); // the old files, byte for byte, and nothing else
    }

    [Fact]
    public void AFileFailingWhileWrittenLeavesNoTemporaryFiles()
    {
        WriteOldSet();
        var before = Snapshot();
        using (var set = new OutputSet())
        {
            set.Stage(Paths[0], Text("new"));
            set.Stage(Paths[1], Text("new"));
            Assert.Throws<IOException>(() => set.Stage(Paths[2], s =>
            {
                s.Write(new byte[100]);
                throw new IOException("No space left on device");
            }));
        } // not committed: disposing removes what was staged
        Assert.Equal(before, Snapshot());
    }
}
