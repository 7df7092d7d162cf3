using System.Text.RegularExpressions;
using StackBuild.Geometry;
using StackBuild.Pipeline;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;
using static StackBuild.Tests.InterruptedBuildTests;

namespace StackBuild.Tests;

/// <summary>
/// Registered pairs kept between builds (<see cref="PairCacheFolder"/>): a build that takes its pairs from the cache writes
/// the volume a build without the cache writes, byte for byte; a changed later-stage option reuses every pair and a changed
/// registration option none; damaged entries are registered again, never trusted.
/// </summary>
public sealed partial class PairCacheTests(NiftiTempFolder temp, ITestOutputHelper output) : IClassFixture<NiftiTempFolder>
{
    /// <summary>16 sections of 128 × 102 px registered at 128 px (as InterruptedBuildTests): 45 pairs, a few seconds a build.</summary>
    private string Series()
    {
        var series = Path.Combine(temp.Path, "series");
        if (!Directory.Exists(series))
        {
            var (code, _, err) = ResliceTestSupport.Cli("demo", series, "--sections", "16", "--size", "128");
            Assert.True(code == 0, err);
        }
        return series;
    }

    /// <summary>Builds into <paramref name="folder"/>/v.nii.gz with --verbose; returns the pair cache's line (null without one).</summary>
    private (string? CacheLine, string Volume, string Sidecar) Build(string folder, params string[] more)
    {
        Directory.CreateDirectory(folder);
        var volume = Path.Combine(folder, "v.nii.gz");
        string[] workSize = more.Contains("--work-size") ? [] : ["--work-size", "128"];
        var (code, _, err) = ResliceTestSupport.Cli(["build", Series(), "-o", volume, "--verbose", .. workSize, .. more]);
        Assert.True(code == 0, err);
        var line = err.Split('\n').Select(l => l.Trim()).SingleOrDefault(l => l.StartsWith("pair cache ", StringComparison.Ordinal));
        output.WriteLine($"{Path.GetFileName(folder)} {string.Join(' ', more)}: {line ?? "(no pair cache)"}");
        return (line, volume, Path.Combine(folder, "v.json"));
    }

    private static (int Reused, int Kept, int Damaged) Counts(string? line)
    {
        Assert.NotNull(line);
        var m = CacheLine().Match(line);
        Assert.True(m.Success, line);
        return (int.Parse(m.Groups["reused"].Value), int.Parse(m.Groups["kept"].Value),
            m.Groups["damaged"].Success ? int.Parse(m.Groups["damaged"].Value) : 0);
    }

    [GeneratedRegex(@": (?<reused>\d+) pairs reused, (?<kept>\d+) registered and kept(?:, (?<damaged>\d+) damaged entries registered again)?$")]
    private static partial Regex CacheLine();

    [Fact]
    public void CachedBuildsWriteTheVolumeOfAnUncachedBuildAndReuseEveryPairWhenOnlyLaterStagesChange()
    {
        var uncached = Build(Path.Combine(temp.Path, "uncached"), "--no-cache");
        Assert.Null(uncached.CacheLine);
        Assert.False(Directory.Exists(Path.Combine(temp.Path, "uncached", PairCacheFolder.DefaultName)), "--no-cache made a cache folder");

        var folder = Path.Combine(temp.Path, "cached");
        var first = Build(folder);
        var (reused, kept, _) = Counts(first.CacheLine);
        Assert.Equal(0, reused);
        // Each present section registered with up to three before it (MirrorParity.MaxReach): one entry per pair.
        Assert.True(kept > 0, first.CacheLine);
        var entries = Directory.GetFiles(Path.Combine(folder, PairCacheFolder.DefaultName), "*.pair");
        Assert.Equal(kept, entries.Length);

        var again = Build(folder);
        Assert.Equal((kept, 0, 0), Counts(again.CacheLine));

        // The volume and the sidecar (all but its time) of both cached builds are those of the build without a cache.
        foreach (var build in new[] { first, again })
        {
            Assert.Equal(Decompressed(uncached.Volume), Decompressed(build.Volume));
            Assert.Equal(WithoutCreated(uncached.Sidecar), WithoutCreated(build.Sidecar));
        }

        // A later stage's option (the output's voxel size; the gap fill) changes the volume but not a pair: all reused,
        // and the volume is the one a build with that option and no cache writes.
        var coarser = Build(folder, "--voxel-size", "60", "--fill", "linear");
        Assert.Equal((kept, 0, 0), Counts(coarser.CacheLine));
        var coarserUncached = Build(Path.Combine(temp.Path, "coarser uncached"), "--voxel-size", "60", "--fill", "linear", "--no-cache");
        Assert.Equal(Decompressed(coarserUncached.Volume), Decompressed(coarser.Volume));
        Assert.NotEqual(Decompressed(uncached.Volume), Decompressed(coarser.Volume));

        // A registration option is part of every pair's key: none reused. (--cache puts the cache elsewhere.)
        var elsewhere = Path.Combine(temp.Path, "elsewhere");
        var otherWorkSize = Build(Path.Combine(temp.Path, "work size"), "--work-size", "96", "--cache", elsewhere);
        Assert.Equal(0, Counts(otherWorkSize.CacheLine).Reused);
        Assert.NotEmpty(Directory.GetFiles(elsewhere, "*.pair"));
        Assert.False(Directory.Exists(Path.Combine(temp.Path, "work size", PairCacheFolder.DefaultName)));
    }

    [Fact]
    public void DamagedEntriesAreRegisteredAgainAndWrittenOver()
    {
        var reference = Build(Path.Combine(temp.Path, "reference"), "--no-cache");
        var folder = Path.Combine(temp.Path, "damaged");
        var (_, kept, _) = Counts(Build(folder).CacheLine);
        var cache = Path.Combine(folder, PairCacheFolder.DefaultName);
        var entries = Directory.GetFiles(cache, "*.pair").Order(StringComparer.Ordinal).ToArray();
        Assert.True(entries.Length >= 6);

        // Truncated (a write cut off), emptied, one bit flipped in a number, garbage of the right length, and two entries
        // whose whole, valid bytes belong to another pair (a file copied over another's name).
        var bytes = File.ReadAllBytes(entries[0]);
        File.WriteAllBytes(entries[0], bytes[..(bytes.Length / 2)]);
        File.WriteAllBytes(entries[1], []);
        var flipped = File.ReadAllBytes(entries[2]);
        flipped[flipped.Length / 2] ^= 0x10;
        File.WriteAllBytes(entries[2], flipped);
        File.WriteAllBytes(entries[3], Enumerable.Range(0, bytes.Length).Select(i => (byte)(i * 37)).ToArray());
        File.Copy(entries[5], entries[4], overwrite: true);
        File.Copy(entries[6], entries[5], overwrite: true);
        const int damaged = 6;

        var rerun = Build(folder);
        // The empty file is damaged too (nothing in it can be trusted): six registered again, the rest reused.
        Assert.Equal((kept - damaged, damaged, damaged), Counts(rerun.CacheLine));
        Assert.Equal(Decompressed(reference.Volume), Decompressed(rerun.Volume));
        Assert.Equal(WithoutCreated(reference.Sidecar), WithoutCreated(rerun.Sidecar));

        // Written over with whole entries: the next build reuses every pair.
        Assert.Equal((kept, 0, 0), Counts(Build(folder).CacheLine));
        Assert.Empty(Directory.GetFiles(cache, ".*")); // no temporary files left behind
    }

    /// <summary>A result with every field set, and numbers that are not round in decimal (so a text form would lose them).</summary>
    private static PairResult Sample()
    {
        var map = Transform2D.Rigid(-70.31570512345678, 12.000000000000002, -3.1e-17, mirrored: true);
        var best = new PairHypothesis(map, true, map.RotationDegrees, 0.9123456789012345, double.PositiveInfinity);
        var runnerUp = new PairHypothesis(Transform2D.Rigid(109.68, 1.0 / 3, 2.0 / 3), false, 109.68, 0.41, 7.25);
        return new PairResult(best, runnerUp, 0.987654321)
        {
            OtherMirror = runnerUp,
            SameMirrorRunnerUpNcc = 0.3000000000000001,
            OtherMirrorRunnerUpNcc = null,
        };
    }

    private static readonly PairKey Key = new(new string('a', 63) + "b");

    [Fact]
    public void AnEntryDecodesToTheSameResultAndNoDamagedCopyOfItDecodesAtAll()
    {
        var result = Sample();
        var bytes = PairCacheFolder.Encode(Key, result);
        var back = PairCacheFolder.Decode(bytes, Key);
        Assert.NotNull(back);
        // Records compare field by field, doubles by their exact value (-0.0 aside, which Equals also tells apart).
        Assert.Equal(result, back);
        Assert.Equal(BitConverter.DoubleToInt64Bits(result.Best.Ncc), BitConverter.DoubleToInt64Bits(back.Best.Ncc));

        // Every shorter prefix (a write cut off anywhere), every single bit flipped, and another key.
        for (int length = 0; length < bytes.Length; length++)
            Assert.Null(PairCacheFolder.Decode(bytes[..length], Key));
        for (int i = 0; i < bytes.Length; i++)
        for (int bit = 0; bit < 8; bit++)
        {
            var copy = (byte[])bytes.Clone();
            copy[i] ^= (byte)(1 << bit);
            Assert.Null(PairCacheFolder.Decode(copy, Key));
        }
        Assert.Null(PairCacheFolder.Decode(bytes, new PairKey(new string('a', 64))));
        Assert.Null(PairCacheFolder.Decode([.. bytes, 0], Key));
    }

    [Fact]
    public void TrimKeepsTheMostRecentlyUsedEntries()
    {
        var cache = new PairCacheFolder(Path.Combine(temp.Path, "trim"));
        var keys = Enumerable.Range(0, 8).Select(i => new PairKey(Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData([(byte)i])))).ToList();
        foreach (var key in keys) cache.Keep(key, Sample());
        var start = DateTime.UtcNow.AddHours(-1);
        for (int i = 0; i < keys.Count; i++) File.SetLastWriteTimeUtc(cache.EntryPath(keys[i]), start.AddMinutes(i));
        Assert.NotNull(cache.Find(keys[0])); // used now: the most recent

        Assert.Equal(5, cache.Trim(maxEntries: 3));
        var left = keys.Where(k => File.Exists(cache.EntryPath(k))).ToList();
        Assert.Equal([keys[0], keys[6], keys[7]], left);
        Assert.True(File.Exists(Path.Combine(cache.Folder, "ABOUT.txt")));
    }

    [Fact]
    public void AKeyChangesWithEitherImageAndWithEveryRegistrationOption()
    {
        var a = new Imaging.GrayImage(4, 3, [.. Enumerable.Range(0, 12).Select(i => i / 12f)]);
        var b = a.Clone();
        b.Pixels[5] = BitConverter.Int32BitsToSingle(BitConverter.SingleToInt32Bits(b.Pixels[5]) + 1); // one ulp
        var c = new Imaging.GrayImage(3, 4, a.Pixels); // the same pixels in another shape
        var (da, db, dc) = (ImageDigest.Of(a), ImageDigest.Of(b), ImageDigest.Of(c));
        Assert.Equal(da, ImageDigest.Of(a.Clone()));
        Assert.NotEqual(da, db);
        Assert.NotEqual(da, dc);

        var o = new RegistrationOptions();
        var key = PairKey.For(da, db, o);
        Assert.Equal(key, PairKey.For(da, db, o with { }));
        Assert.NotEqual(key, PairKey.For(db, da, o)); // which section is fixed matters
        Assert.NotEqual(key, PairKey.For(da, dc, o));
        var variants = new[]
        {
            o with { WorkSize = 256 }, o with { UpsampleFactor = 10 }, o with { KnownMirrored = false }, o with { KnownMirrored = true },
            o with { AllowMirror = false }, o with { Polarity = TissuePolarity.DarkOnBright }, o with { ForegroundMask = false },
            o with { LowPass = 0.12000000000000001 }, o with { RotationCandidates = 4 }, o with { AngleTolerance = 0.04 }, o with { CoarseToFine = false },
        };
        // Every option of the record is varied once (a new option needs a line here; the count says when one is missing).
        Assert.Equal(typeof(RegistrationOptions).GetProperties().Count(p => p.CanWrite && p.Name != "EqualityContract"), variants.Length - 1);
        var keys = variants.Select(v => PairKey.For(da, db, v)).Append(key).ToList();
        Assert.Equal(keys.Count, keys.Distinct().Count());
    }
}
