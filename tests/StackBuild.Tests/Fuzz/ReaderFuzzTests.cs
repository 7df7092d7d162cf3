using System.IO.Compression;
using System.Text.Json;
using BitMiracle.LibTiff.Classic;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Pipeline;
using StackBuild.Series;
using StackBuild.Write;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests.Fuzz;

/// <summary>
/// Mutated inputs for the readers a user's files reach: the NIfTI-1 reader, the series manifest (through the series reader),
/// the build sidecar (with its geometry and the point mapping built on it, and the check <c>info</c> makes beside a volume),
/// and section images (identified, then decoded reduced). Each case is a valid seed file changed by a seeded mutation
/// (<see cref="Mutations"/>). The property, per case: the reader returns or refuses with the project's own
/// <see cref="InputProblemException"/> (or several, <see cref="InputProblemsException"/>); no other exception; no more than
/// <see cref="AllocationBound"/> bytes of managed memory taken on the reading thread (a header declaring a gigantic size
/// must be refused before its memory is taken); and the case finishes (a hang guard, far above any case's time, that names
/// the case if one never returns). A failing case is saved under the test's temporary folder and its seed is named.
/// A few thousand cases run in the normal test run; STACKBUILD_SOAK=1 runs 100,000 per reader.
/// Reproduce: dotnet test tests/StackBuild.Tests -c Release --filter "FullyQualifiedName~ReaderFuzz"
/// </summary>
public sealed class ReaderFuzzTests(ITestOutputHelper log) : IDisposable
{
    /// <summary>Managed bytes a case may allocate on its thread: the seeds are at most a few hundred KB, so a legitimate read takes a few MB.</summary>
    private const long AllocationBound = 256L << 20;

    /// <summary>A case that has not returned after this long is hung (cases take milliseconds); this is a guard, not a measure of speed.</summary>
    private static readonly TimeSpan HangGuard = TimeSpan.FromMinutes(2);

    private const int SoakCases = 100_000;

    private readonly string _root = Directory.CreateTempSubdirectory("sb-fuzz-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_root, true); } catch (IOException) { }
    }

    // ---- the four readers ----

    [Fact] public void NiftiReader() => Run("nifti", 1200, NiftiCase);
    [Fact] public void ManifestThroughTheSeriesReader() => Run("manifest", 500, ManifestCase);
    [Fact] public void SidecarReader() => Run("sidecar", 500, SidecarCase);
    [Fact] public void ImageIdentification() => Run("image", 1500, ImageCase);

    [SoakFact] public void NiftiReaderSoak() => Run("nifti", SoakCases, NiftiCase);
    [SoakFact] public void ManifestSoak() => Run("manifest", SoakCases, ManifestCase);
    [SoakFact] public void SidecarReaderSoak() => Run("sidecar", SoakCases, SidecarCase);
    [SoakFact] public void ImageIdentificationSoak() => Run("image", SoakCases, ImageCase);

    /// <summary>
    /// One case: makes its input in <paramref name="folder"/> from <paramref name="random"/> and runs the reader on it;
    /// with <paramref name="mutate"/> false, the seed itself, unchanged (chosen by <paramref name="random"/>).
    /// </summary>
    private delegate void FuzzCase(string folder, Random random, bool mutate);

    /// <summary>The control: every seed, unchanged, is read without any problem, so the mutations start from valid files.</summary>
    [Fact]
    public void TheSeedsAreReadWithoutProblems()
    {
        foreach (var (name, fuzzCase) in new (string, FuzzCase)[] { ("nifti", NiftiCase), ("manifest", ManifestCase), ("sidecar", SidecarCase), ("image", ImageCase) })
            for (int i = 0; i < 40; i++)
            {
                var folder = Directory.CreateDirectory(Path.Combine(_root, $"seed-{name}-{i}")).FullName;
                var e = Record.Exception(() => fuzzCase(folder, new Random(i), mutate: false));
                Assert.True(e is null, $"{name} seed {i}: {e}");
            }
    }

    /// <summary>The inputs the fuzzing found a failure with (tests/StackBuild.Tests/Fuzz/found), as saved when they failed.</summary>
    public static TheoryData<string> FoundInputs() =>
        [.. Directory.GetFiles(Path.Combine(RepositoryPaths.Root, "tests", "StackBuild.Tests", "Fuzz", "found")).Select(f => Path.GetFileName(f)!).Order(StringComparer.Ordinal)];

    /// <summary>Each input the fuzzing found a failure with is now refused with one input problem naming the file, and takes little memory.</summary>
    [Theory]
    [MemberData(nameof(FoundInputs))]
    public void WhatTheFuzzingFoundIsRefused(string name)
    {
        var path = Path.Combine(_root, name);
        File.Copy(Path.Combine(RepositoryPaths.Root, "tests", "StackBuild.Tests", "Fuzz", "found", name), path);
        long before = GC.GetAllocatedBytesForCurrentThread();
        var e = Record.Exception(() =>
        {
            if (name.EndsWith(".csv", StringComparison.Ordinal))
            {
                // A manifest: read through the series reader, in a folder with the sections it may name.
                var folder = Directory.CreateDirectory(Path.Combine(_root, "series")).FullName;
                for (int n = 1; n <= 3; n++) File.WriteAllBytes(Path.Combine(folder, $"s_{n:000}.png"), SmallPng.Value);
                File.Copy(path, Path.Combine(folder, SeriesManifest.DefaultName));
                path = Path.Combine(folder, SeriesManifest.DefaultName);
                SeriesReader.Open(folder, new SeriesOptions());
            }
            else if (name.EndsWith(".json", StringComparison.Ordinal))
            {
                // What info does with the sidecar beside a volume: a sidecar it cannot read is passed over.
                var volume = path[..^".json".Length] + ".nii.gz";
                File.WriteAllBytes(volume, SidecarVolume);
                try { SidecarFile.CheckBeside(volume); }
                catch (InputProblemException) { }
                var record = SidecarFile.Read(path);
                SidecarFile.Geometry(record, path);
                _ = new PointMapping(record, path);
            }
            else
            {
                SectionImageReader.Identify(path);
                SectionImageReader.ReadSection(path, new ImageReadOptions { MaxLongSide = 16 });
            }
        });
        long allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        log.WriteLine($"{name}: {e?.Message} ({allocated:N0} bytes allocated)");
        var problems = e is InputProblemsException many ? many.Problems : [Assert.IsType<InputProblemException>(e)];
        foreach (var problem in problems)
        {
            Assert.StartsWith(path, problem.Message);
            Assert.Contains(" — ", problem.Message);
            Assert.DoesNotContain("System.", problem.Message);
            Assert.True(problem.Message.IndexOfAny(['\r', '\n']) < 0, $"more than one line: {problem.Message}");
        }
        Assert.True(allocated < 16 << 20, $"{allocated:N0} bytes allocated");
    }

    /// <summary>Runs one stage of a case; a refusal (the project's own input problem) ends only that stage.</summary>
    private static void Stage(Action read)
    {
        try { read(); }
        catch (InputProblemException) { }
    }

    private void Run(string name, int cases, FuzzCase fuzzCase)
    {
        var failures = new Dictionary<string, string>(StringComparer.Ordinal); // one example per kind of failure
        int refused = 0, accepted = 0;
        long largest = 0;
        for (int i = 0; i < cases; i++)
        {
            int seed = unchecked(i * 7919 + name.Aggregate(17, (h, c) => h * 31 + c));
            var folder = Path.Combine(_root, $"{name}-{i}");
            Directory.CreateDirectory(folder);
            Exception? thrown = null;
            long allocated = 0;
            var task = Task.Factory.StartNew(() =>
            {
                long before = GC.GetAllocatedBytesForCurrentThread();
                try { fuzzCase(folder, new Random(seed), mutate: true); }
                catch (Exception e) { thrown = e; }
                allocated = GC.GetAllocatedBytesForCurrentThread() - before;
            }, TaskCreationOptions.LongRunning);
            if (!task.Wait(HangGuard))
            {
                failures["hang"] = $"case {i} (seed {seed}) did not return; its input is in {folder}";
                break;
            }
            largest = Math.Max(largest, allocated);
            string? kind = null;
            if (thrown is InputProblemException or InputProblemsException) refused++;
            else if (thrown is null) accepted++;
            else kind = $"{thrown.GetType().Name} at {TopFrame(thrown)}";
            if (allocated > AllocationBound) kind = $"allocated {allocated:N0} bytes";
            // The line a user sees: no .NET type names, and one line per problem.
            var lines = thrown switch
            {
                InputProblemsException many => many.Problems.Select(p => p.Message),
                InputProblemException one => [one.Message],
                _ => [],
            };
            foreach (var line in lines)
            {
                if (line.Contains("System.", StringComparison.Ordinal)) kind ??= "a message names a .NET type";
                if (line.IndexOfAny(['\n', '\r']) >= 0) kind ??= "a message runs over more than one line";
            }
            if (kind is null)
            {
                Directory.Delete(folder, true);
                continue;
            }
            var kept = Path.Combine(Path.GetTempPath(), "stackbuild-fuzz-failures", $"{name}-{i}");
            CopyFolder(folder, kept);
            Directory.Delete(folder, true);
            var trace = string.Join(" < ", (thrown?.StackTrace ?? "").Split('\n').Take(4).Select(l => l.Trim()));
            failures.TryAdd(kind, $"case {i} (seed {seed}): {thrown?.GetType().Name}: {thrown?.Message} [{trace}] — input kept in {kept}");
        }
        log.WriteLine($"{name}: {cases} cases, {refused} refused with an input problem, {accepted} accepted, largest allocation {largest:N0} bytes");
        Assert.True(failures.Count == 0, $"{name}: {failures.Count} kind(s) of failure:\n" +
            string.Join("\n", failures.Select(f => $"{f.Key}: {f.Value}")));
    }

    private static string TopFrame(Exception e)
    {
        var frame = new System.Diagnostics.StackTrace(e, false).GetFrames()
            .FirstOrDefault(f => f.GetMethod()?.DeclaringType?.Namespace?.StartsWith("StackBuild", StringComparison.Ordinal) == true);
        var method = frame?.GetMethod();
        return method is null ? "?" : $"{method.DeclaringType?.Name}.{method.Name}";
    }

    private static void CopyFolder(string from, string to)
    {
        Directory.CreateDirectory(to);
        foreach (var f in Directory.GetFiles(from)) File.Copy(f, Path.Combine(to, Path.GetFileName(f)), overwrite: true);
    }

    // ---- NIfTI ----

    /// <summary>nifti1.h's header fields that size and place the data, and the geometry.</summary>
    private static readonly HeaderField[] NiftiFields =
    [
        new("sizeof_hdr", 0, FieldKind.Int32),
        .. Enumerable.Range(0, 8).Select(k => new HeaderField($"dim[{k}]", 40 + 2 * k, FieldKind.Int16)),
        new("datatype", 70, FieldKind.Int16),
        new("bitpix", 72, FieldKind.Int16),
        .. Enumerable.Range(0, 8).Select(k => new HeaderField($"pixdim[{k}]", 76 + 4 * k, FieldKind.Float32)),
        new("vox_offset", 108, FieldKind.Float32),
        new("scl_slope", 112, FieldKind.Float32),
        new("scl_inter", 116, FieldKind.Float32),
        new("xyzt_units", 123, FieldKind.Byte),
        new("cal_max", 124, FieldKind.Float32),
        new("cal_min", 128, FieldKind.Float32),
        new("qform_code", 252, FieldKind.Int16),
        new("sform_code", 254, FieldKind.Int16),
        .. Enumerable.Range(0, 6).Select(k => new HeaderField($"quatern/qoffset[{k}]", 256 + 4 * k, FieldKind.Float32)),
        .. Enumerable.Range(0, 12).Select(k => new HeaderField($"srow[{k}]", 280 + 4 * k, FieldKind.Float32)),
        new("magic", 344, FieldKind.Int32),
    ];

    private static readonly Lazy<byte[][]> NiftiSeeds = new(() =>
    {
        var folder = Directory.CreateTempSubdirectory("sb-fuzz-seeds-").FullName;
        try
        {
            var affine = Affine.FromRows([0.02, 0, 0, -1], [0, 0, -0.02, 2], [0, 0.05, 0, 0.5]);
            var volume = new Volume(9, 7, 5, affine, [.. Enumerable.Range(0, 9 * 7 * 5).Select(v => (float)(v % 200))]);
            var seeds = new List<byte[]>();
            foreach (var type in new[] { NiftiDataType.UInt8, NiftiDataType.UInt16, NiftiDataType.Float32, NiftiDataType.Int16 })
            {
                var path = Path.Combine(folder, $"{type}.nii");
                NiftiFile.Write(path, volume, new NiftiWriteOptions { DataType = type });
                seeds.Add(File.ReadAllBytes(path));
            }
            // Files written by another implementation (nibabel's test data, Debian python3-nibabel), when present.
            foreach (var name in new[] { "functional.nii", "standard.nii.gz" })
            {
                var other = Path.Combine("/usr/lib/python3/dist-packages/nibabel/tests/data", name);
                if (File.Exists(other)) seeds.Add(File.ReadAllBytes(other));
            }
            return [.. seeds];
        }
        finally
        {
            Directory.Delete(folder, true);
        }
    });

    private static void NiftiCase(string folder, Random random, bool mutate)
    {
        var seed = NiftiSeeds.Value[random.Next(NiftiSeeds.Value.Length)];
        bool gzipped = seed.Length > 2 && seed[0] == 0x1f && seed[1] == 0x8b;
        byte[] bytes;
        switch (mutate ? random.Next(3) : -1)
        {
            case 0 when !gzipped: // a plain .nii, mutated
                bytes = Mutations.Bytes(seed, random, NiftiFields);
                break;
            case 1: // mutated inside, then compressed: the header fields reach the reader through gzip
                bytes = Gzip(Mutations.Bytes(gzipped ? Gunzip(seed) : seed, random, NiftiFields));
                break;
            case 2: // the compressed bytes themselves mutated
                bytes = Mutations.Bytes(gzipped ? seed : Gzip(seed), random);
                break;
            default:
                bytes = seed;
                break;
        }
        var path = Path.Combine(folder, random.Next(2) == 0 ? "v.nii" : "v.nii.gz");
        File.WriteAllBytes(path, bytes);
        Stage(() => NiftiFile.ReadHeader(path));
        var image = NiftiFile.Read(path);
        _ = image.Header.Affine;
    }

    private static byte[] Gzip(byte[] data)
    {
        using var output = new MemoryStream();
        using (var gz = new GZipStream(output, CompressionLevel.Fastest, leaveOpen: true)) gz.Write(data);
        return output.ToArray();
    }

    private static byte[] Gunzip(byte[] data)
    {
        using var input = new GZipStream(new MemoryStream(data), CompressionMode.Decompress);
        using var output = new MemoryStream();
        input.CopyTo(output);
        return output.ToArray();
    }

    // ---- manifest ----

    private const string ManifestSeed =
        "# a series of four sections\n" +
        "#! pixel_size_um = 10\n" +
        "#! spacing_um = 50\n" +
        "section,file,position_um,pixel_size_um,mirrored,exclude,damaged,note\n" +
        "1,s_001.png,0,10,no,no,no,\n" +
        "2,s_002.png,50,,yes,no,yes,\"torn, a little\"\n" +
        "3,,100,,,no,no,lost\n" +
        "4,s_003.png,150,10,,yes,no,\"said \"\"faint\"\"\"\n";

    private static readonly Lazy<byte[]> SmallPng = new(() =>
    {
        var path = Path.Combine(Path.GetTempPath(), $"sb-fuzz-seed-{Guid.NewGuid():N}.png");
        try
        {
            SectionImageTestFiles.Gray8Png(path, 16, 12, (x, y) => (byte)(x * 9 + y * 5));
            return File.ReadAllBytes(path);
        }
        finally { File.Delete(path); }
    });

    private static void ManifestCase(string folder, Random random, bool mutate)
    {
        for (int n = 1; n <= 3; n++) File.WriteAllBytes(Path.Combine(folder, $"s_{n:000}.png"), SmallPng.Value);
        var text = mutate ? Mutations.Lines(ManifestSeed, random) : ManifestSeed;
        var bytes = mutate && random.Next(3) == 0 ? Mutations.Bytes(Mutations.Utf8(text), random) : Mutations.Utf8(text);
        File.WriteAllBytes(Path.Combine(folder, SeriesManifest.DefaultName), bytes);
        SeriesReader.Open(folder, new SeriesOptions());
    }

    // ---- sidecar ----

    /// <summary>The bytes standing for the sidecar's volume (only its checksum is read).</summary>
    private static readonly byte[] SidecarVolume = [0x1f, 0x8b, 8, 0, 1, 2, 3];

    private static readonly Lazy<string> SidecarSeed = new(() =>
    {
        double[][] matrix = [[0.5, 0.01, 3], [-0.01, 0.5, 4], [0, 0, 1]];
        var record = new BuildRecord
        {
            Version = "fuzz", Created = "2026-12-03T00:00:00Z", Input = "series", Volume = "v.nii.gz",
            VolumeSha256 = Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(SidecarVolume)), Aligned = true, Dimensions = [40, 30, 4], VoxelSizeMm = [0.02, 0.02, 0.05],
            AxisCodes = "RIP", Affine = [[0.02, 0, 0, -0.4], [0, 0, -0.05, 0.1], [0, -0.02, 0, 0.3], [0, 0, 0, 1]],
            InputPixelSizeUm = 10, SpacingUm = 50, ReferenceSection = 2,
            Frame = new FrameRecord { ReferenceSection = 2, ReferenceChosenBy = "middle", TissueBoxVoxels = [1, 1, 39, 29] },
            Warnings = ["a warning"],
            Sections =
            [
                new SectionRecord { Number = 1, File = "s_001.png", Status = SectionOutcome.Aligned, Mirrored = false, RotationDegrees = 3, ShiftPx = [1, 2],
                    Confidence = 0.9, RegisteredTo = 2, Route = Solve.LinkRoute.Neighbour, ZIndex = 0, PositionUm = 0, PixelSizeUm = 10,
                    ImageSizePx = [64, 48], Matrix = matrix, Pairs = [new PairLinkRecord { With = 2, Confidence = 0.9, Weight = 0.8, ResidualUm = 1 }],
                    RunnerUp = new HypothesisRecord(true, 180, 0.2) },
                new SectionRecord { Number = 2, File = "s_002.png", Status = SectionOutcome.Aligned, ZIndex = 1, PositionUm = 50, PixelSizeUm = 10,
                    ImageSizePx = [64, 48], Matrix = matrix, Route = Solve.LinkRoute.Reference },
                new SectionRecord { Number = 3, Status = SectionOutcome.Gap, ZIndex = 2, PositionUm = 100, Filled = "linear", FilledFrom = [2, 4] },
                new SectionRecord { Number = 4, File = "s_004.png", Status = SectionOutcome.Aligned, ZIndex = 3, PositionUm = 150, PixelSizeUm = 10,
                    ImageSizePx = [64, 48], Matrix = matrix, VolumeZ = 3 },
            ],
        };
        return JsonSerializer.Serialize(record, BuildWriter.JsonOptions);
    });

    private static void SidecarCase(string folder, Random random, bool mutate)
    {
        var text = mutate ? Mutations.Json(SidecarSeed.Value, random) : SidecarSeed.Value;
        var bytes = mutate && random.Next(3) == 0 ? Mutations.Bytes(Mutations.Utf8(text), random) : Mutations.Utf8(text);
        var sidecar = Path.Combine(folder, "v.json");
        File.WriteAllBytes(sidecar, bytes);
        File.WriteAllBytes(Path.Combine(folder, "v.nii.gz"), SidecarVolume);
        Stage(() => SidecarFile.CheckBeside(Path.Combine(folder, "v.nii.gz"))); // what info does beside a volume
        var record = SidecarFile.Read(sidecar);
        Stage(() => SidecarFile.CheckVolume(sidecar, record.Volume, record.VolumeSha256, TextWriter.Null)); // evaluate, apply, points
        Stage(() => SidecarFile.Geometry(record, sidecar));
        var mapping = new PointMapping(record, sidecar);
        Stage(() => mapping.MapCsv("marks.csv", "section,x,y\n1,10,12\n4,0,0\n", inverse: false));
        mapping.MapCsv("targets.csv", "x_mm,y_mm,z_mm\n0,0,0\n-0.2,0.1,0.3\n", inverse: true);
    }


    // ---- section images ----

    private static readonly Lazy<(string Name, byte[] Bytes)[]> ImageSeeds = new(() =>
    {
        var folder = Directory.CreateTempSubdirectory("sb-fuzz-seeds-").FullName;
        try
        {
            var seeds = new List<(string, string)>
            {
                ("gray8.png", "gray8.png"), ("gray16.png", "gray16.png"), ("rgb8.png", "rgb8.png"), ("gray.jpg", "gray.jpg"), ("rgb.jpg", "rgb.jpg"),
                ("gray8.tif", "gray8.tif"), ("tiled16.tif", "tiled16.tif"), ("planar-lzw.tif", "planar-lzw.tif"), ("big-endian.tif", "big-endian.tif"),
            };
            string P(string n) => Path.Combine(folder, n);
            SectionImageTestFiles.Gray8Png(P("gray8.png"), 24, 20, (x, y) => (byte)(x * 9 + y * 5));
            SectionImageTestFiles.Gray16Png(P("gray16.png"), 24, 20, (x, y) => (ushort)(x * 2000 + y * 90));
            SectionImageTestFiles.Rgb8Png(P("rgb8.png"), 24, 20, (x, y) => new Rgb24((byte)(x * 9), (byte)(y * 11), 100));
            SectionImageTestFiles.GrayJpeg(P("gray.jpg"), 24, 20, (x, y) => (byte)(x * 9 + y * 5));
            SectionImageTestFiles.RgbJpeg(P("rgb.jpg"), 24, 20, (x, y) => new Rgb24((byte)(x * 9), (byte)(y * 11), 100));
            SectionImageTestFiles.Gray8Tiff(P("gray8.tif"), 24, 20, (x, y) => (byte)(x * 9 + y * 5));
            SectionImageTestFiles.LibTiff(P("tiled16.tif"), 40, 36, 16, 1, (x, y, _) => x * 1000 + y);
            SectionImageTestFiles.LibTiff(P("planar-lzw.tif"), 24, 20, 8, 3, (x, y, s) => x * 9 + s * 30, tile: null, planar: true,
                compression: Compression.LZW);
            SectionImageTestFiles.LibTiff(P("big-endian.tif"), 24, 20, 16, 1, (x, y, _) => y * 3000, tile: null, bigEndian: true,
                compression: Compression.NONE);
            return [.. seeds.Select(s => (s.Item1, File.ReadAllBytes(P(s.Item2))))];
        }
        finally
        {
            Directory.Delete(folder, true);
        }
    });

    /// <summary>A PNG's IHDR width and height (big-endian, at 16 and 20): set through <see cref="SectionImageTestFiles.PatchPngSize"/>, which keeps the CRC valid.</summary>
    private static readonly uint[] PngSizes = [0, 1, 46341, 65535, 100_000, 0x7FFF_FFFF, 0xFFFF_FFFF, 30_000, 45_000];

    private static void ImageCase(string folder, Random random, bool mutate)
    {
        var (name, seed) = ImageSeeds.Value[random.Next(ImageSeeds.Value.Length)];
        var path = Path.Combine(folder, name);
        File.WriteAllBytes(path, mutate ? Mutations.Bytes(seed, random) : seed);
        if (mutate && name.EndsWith(".png", StringComparison.Ordinal) && random.Next(4) == 0 && new FileInfo(path).Length > 33)
            SectionImageTestFiles.PatchPngSize(path, PngSizes[random.Next(PngSizes.Length)], PngSizes[random.Next(PngSizes.Length)]);
        SectionImageReader.Identify(path);
        SectionImageReader.ReadSection(path, new ImageReadOptions { MaxLongSide = 16 });
    }
}
