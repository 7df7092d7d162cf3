using System.Runtime.InteropServices;
using System.Security.Cryptography;
using System.Text;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Numerics;
using StackBuild.Register;

namespace StackBuild.Pipeline;

/// <summary>
/// Where registered pairs are kept from one build to the next: the edge between the register stage and results of
/// earlier runs, as <see cref="ISectionImages"/> is the edge to the images. The stage asks before it registers a pair and
/// hands over what it registered; a cache that finds nothing, or cannot keep anything, only costs the time to register.
/// </summary>
public interface IPairCache
{
    /// <summary>The result kept under <paramref name="key"/>, or null when there is none that can be trusted.</summary>
    PairResult? Find(PairKey key);

    /// <summary>Keeps <paramref name="result"/> under <paramref name="key"/>; failing to keep it is not an error.</summary>
    void Keep(PairKey key, PairResult result);
}

/// <summary>
/// Everything a pair's result depends on, hashed (SHA-256, hex): both sections' working images (the pixels the
/// registration preparation starts from, and a small section's finer image), every registration option (the per-pair mirror knowledge included), the FFT in
/// use (FFTW and the managed FFT round differently), the program's version and <see cref="SectionRegistration.CodeVersion"/>.
/// </summary>
public readonly record struct PairKey(string Hex)
{
    /// <summary>Bumped when the layout of what is hashed changes.</summary>
    private const int KeyLayout = 1;

    /// <summary>
    /// The key of registering <paramref name="moving"/> onto <paramref name="fixedSection"/> (their <see cref="ImageDigest"/>s)
    /// with <paramref name="options"/>.
    /// </summary>
    public static PairKey For(ImageDigest fixedSection, ImageDigest moving, RegistrationOptions options)
    {
        // Every public option is in the key through its JSON form (doubles in their shortest round-trip form), so an option
        // added later is part of it without anyone remembering to add it here.
        var text = string.Join("\n", "stackbuild pair", KeyLayout, SectionRegistration.CodeVersion, BuildPipeline.Version, Fft2D.ProviderName,
            JsonSerializer.Serialize(options), fixedSection.Hex, moving.Hex);
        return new PairKey(Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(text))));
    }
}

/// <summary>
/// A SHA-256 of an image's size and its pixels' bytes (hex), and of the finer image a small section keeps for registration
/// (<see cref="PreparedSection.Finer"/>) when it has one: a pair of two small sections is registered on those.
/// </summary>
public readonly record struct ImageDigest(string Hex)
{
    public static ImageDigest Of(GrayImage image, GrayImage? finer = null)
    {
        using var sha = IncrementalHash.CreateHash(HashAlgorithmName.SHA256);
        Span<byte> size = stackalloc byte[8];
        foreach (var im in finer is null ? [image] : new[] { image, finer })
        {
            BitConverter.TryWriteBytes(size, im.Width);
            BitConverter.TryWriteBytes(size[4..], im.Height);
            sha.AppendData(size);
            sha.AppendData(MemoryMarshal.AsBytes(im.Pixels.AsSpan()));
        }
        return new ImageDigest(Convert.ToHexStringLower(sha.GetHashAndReset()));
    }
}

/// <summary>
/// A pair cache in a folder: one small file per pair, named by its key (<c>KEY.pair</c>), written under a temporary name
/// and renamed (<see cref="AtomicFile"/>). A file is trusted only when it is whole: its magic, format, the key it was
/// written under and a SHA-256 of its contents must all agree; anything else (truncated, damaged, another entry's bytes)
/// is treated as missing, registered again and written over. The folder may be deleted at any time (between builds;
/// during one it only costs the pairs registered again). Its size is bounded: after a build <see cref="Trim"/> keeps the
/// <see cref="MaxEntries"/> most recently used entries.
/// </summary>
public sealed class PairCacheFolder : IPairCache
{
    /// <summary>The folder's name beside a build's output when no other is given.</summary>
    public const string DefaultName = "stackbuild-cache";

    /// <summary>
    /// Most entries kept: about 400 bytes each (4 KB on most file systems, so at most about 80 MB on disk), the first three
    /// neighbours of some 6,000 sections.
    /// </summary>
    public const int MaxEntries = 20_000;

    private const string Extension = ".pair";
    private const int Format = 1;
    private static ReadOnlySpan<byte> Magic => "SBPAIR\r\n"u8;
    /// <summary>An entry is a few hundred bytes; anything larger is not one.</summary>
    private const int MaxEntryBytes = 4096;

    private int _reused, _kept, _untrusted, _notKept;

    public PairCacheFolder(string folder) => Folder = Path.GetFullPath(folder);

    /// <summary><see cref="DefaultName"/> in the folder of <paramref name="outputPath"/>.</summary>
    public static string DefaultFor(string outputPath) =>
        Path.Combine(Path.GetDirectoryName(Path.GetFullPath(outputPath)) ?? ".", DefaultName);

    public string Folder { get; }

    /// <summary>Pairs found and used in this run.</summary>
    public int Reused => _reused;
    /// <summary>Pairs registered and written in this run.</summary>
    public int Kept => _kept;
    /// <summary>Entries found but not trusted (damaged, truncated, not what their name says) in this run.</summary>
    public int Untrusted => _untrusted;
    /// <summary>Pairs that could not be written (a full disk, no permission); the build goes on without them.</summary>
    public int NotKept => _notKept;

    /// <summary>The file of <paramref name="key"/>'s entry.</summary>
    public string EntryPath(PairKey key) => Path.Combine(Folder, key.Hex + Extension);

    public PairResult? Find(PairKey key)
    {
        var path = EntryPath(key);
        byte[] bytes;
        try
        {
            var info = new FileInfo(path);
            if (!info.Exists) return null;
            if (info.Length > MaxEntryBytes) { Interlocked.Increment(ref _untrusted); return null; }
            bytes = File.ReadAllBytes(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { return null; }
        var result = Decode(bytes, key);
        if (result is null) { Interlocked.Increment(ref _untrusted); return null; }
        // Used now: Trim keeps the entries used most recently.
        try { File.SetLastWriteTimeUtc(path, DateTime.UtcNow); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { }
        Interlocked.Increment(ref _reused);
        return result;
    }

    public void Keep(PairKey key, PairResult result)
    {
        try
        {
            if (!Directory.Exists(Folder))
            {
                Directory.CreateDirectory(Folder);
                AtomicFile.WriteAllText(Path.Combine(Folder, "ABOUT.txt"),
                    "Pairs of sections registered by stackbuild builds, kept so that a build run again (after an interruption, or\n" +
                    "with other output options) does not register them again. This folder may be deleted at any time; builds then\n" +
                    "register the pairs afresh. `stackbuild build --no-cache` neither reads nor writes it.\n");
            }
            AtomicFile.WriteAllBytes(EntryPath(key), Encode(key, result));
            Interlocked.Increment(ref _kept);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or InputProblemException)
        {
            Interlocked.Increment(ref _notKept);
        }
    }

    /// <summary>
    /// Keeps the <see cref="MaxEntries"/> most recently used entries and removes the rest, and removes temporary files of
    /// writes that were cut off more than an hour ago. Failures to remove are ignored. Returns the number removed.
    /// </summary>
    public int Trim(int maxEntries = MaxEntries)
    {
        if (!Directory.Exists(Folder)) return 0;
        int removed = 0;
        try
        {
            var files = new DirectoryInfo(Folder).GetFiles();
            var entries = files.Where(f => f.Name.EndsWith(Extension, StringComparison.Ordinal)).OrderByDescending(f => f.LastWriteTimeUtc).ToList();
            var stale = files.Where(f => f.Name.StartsWith('.') && f.Name.EndsWith(".part", StringComparison.Ordinal) &&
                                         f.LastWriteTimeUtc < DateTime.UtcNow.AddHours(-1));
            foreach (var f in entries.Skip(Math.Max(0, maxEntries)).Concat(stale))
            {
                try { f.Delete(); removed++; }
                catch (Exception e) when (e is IOException or UnauthorizedAccessException) { }
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { }
        return removed;
    }

    /// <summary>An entry: magic, format, key, the result, then a SHA-256 of all before it.</summary>
    internal static byte[] Encode(PairKey key, PairResult result)
    {
        using var buffer = new MemoryStream();
        using (var w = new BinaryWriter(buffer, Encoding.UTF8, leaveOpen: true))
        {
            w.Write(Magic);
            w.Write(Format);
            w.Write(Convert.FromHexString(key.Hex));
            WriteHypothesis(w, result.Best);
            WriteOptional(w, result.RunnerUp);
            w.Write(result.Confidence);
            WriteOptional(w, result.OtherMirror);
            WriteOptional(w, result.SameMirrorRunnerUpNcc);
            WriteOptional(w, result.OtherMirrorRunnerUpNcc);
        }
        var body = buffer.ToArray();
        return [.. body, .. SHA256.HashData(body)];
    }

    /// <summary>The result in <paramref name="bytes"/> when they are a whole entry written under <paramref name="key"/>; else null.</summary>
    internal static PairResult? Decode(byte[] bytes, PairKey key)
    {
        const int hashBytes = 32;
        if (bytes.Length < Magic.Length + 4 + hashBytes + hashBytes) return null;
        var body = bytes.AsSpan(0, bytes.Length - hashBytes);
        if (!SHA256.HashData(body).AsSpan().SequenceEqual(bytes.AsSpan(bytes.Length - hashBytes))) return null;
        try
        {
            using var r = new BinaryReader(new MemoryStream(bytes, 0, body.Length), Encoding.UTF8);
            if (!r.ReadBytes(Magic.Length).AsSpan().SequenceEqual(Magic) || r.ReadInt32() != Format) return null;
            if (!r.ReadBytes(hashBytes).AsSpan().SequenceEqual(Convert.FromHexString(key.Hex))) return null; // another pair's entry
            var best = ReadHypothesis(r);
            var runnerUp = ReadOptional(r, ReadHypothesis);
            double confidence = r.ReadDouble();
            var result = new PairResult(best, runnerUp, confidence)
            {
                OtherMirror = ReadOptional(r, ReadHypothesis),
                SameMirrorRunnerUpNcc = ReadOptionalDouble(r),
                OtherMirrorRunnerUpNcc = ReadOptionalDouble(r),
            };
            return r.BaseStream.Position == body.Length ? result : null;
        }
        catch (EndOfStreamException) { return null; }
    }

    private static void WriteHypothesis(BinaryWriter w, PairHypothesis h)
    {
        var m = h.MovingToFixed;
        foreach (var v in (ReadOnlySpan<double>)[m.M00, m.M01, m.M02, m.M10, m.M11, m.M12]) w.Write(v);
        w.Write(h.Mirrored);
        w.Write(h.RotationDegrees);
        w.Write(h.Ncc);
        w.Write(h.PeakToSidelobe);
    }

    private static PairHypothesis ReadHypothesis(BinaryReader r)
    {
        var m = new Transform2D(r.ReadDouble(), r.ReadDouble(), r.ReadDouble(), r.ReadDouble(), r.ReadDouble(), r.ReadDouble());
        return new PairHypothesis(m, r.ReadBoolean(), r.ReadDouble(), r.ReadDouble(), r.ReadDouble());
    }

    private static void WriteOptional(BinaryWriter w, PairHypothesis? h)
    {
        w.Write(h is not null);
        if (h is not null) WriteHypothesis(w, h);
    }

    private static void WriteOptional(BinaryWriter w, double? v)
    {
        w.Write(v.HasValue);
        if (v is double d) w.Write(d);
    }

    private static PairHypothesis? ReadOptional(BinaryReader r, Func<BinaryReader, PairHypothesis> read) =>
        r.ReadBoolean() ? read(r) : null;

    private static double? ReadOptionalDouble(BinaryReader r) => r.ReadBoolean() ? r.ReadDouble() : null;
}
