using System.Buffers.Binary;
using System.Diagnostics;
using System.Security.Cryptography;
using System.Text;
using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Nifti;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The bad-input corpus (docs/bad-inputs.md): one test per damaged or unusual input, each made here in a temporary
/// folder. A refused input must give exactly one line naming the file, the problem and what to do, the exit code
/// README's table gives, leave every input byte for byte as it was (SHA-256 before and after) and leave nothing at
/// the output paths (no volume, sidecar, report or temporary file). An input that is legitimately accepted is built,
/// and the volume is read back with nibabel (Debian python3-nibabel), an outside reader.
/// Reproduce: dotnet test tests/StackBuild.Tests -c Release --filter "FullyQualifiedName~BadInput"
/// </summary>
public sealed class BadInputCorpusTests : IDisposable
{
    private readonly ITestOutputHelper _log;
    private readonly string _root = Directory.CreateTempSubdirectory("sb-badinput-").FullName;
    private readonly string _in;
    private readonly string _out;

    public BadInputCorpusTests(ITestOutputHelper log)
    {
        _log = log;
        _in = Directory.CreateDirectory(Path.Combine(_root, "in")).FullName;
        _out = Directory.CreateDirectory(Path.Combine(_root, "out")).FullName;
    }

    public void Dispose()
    {
        try { Directory.Delete(_root, true); } catch (IOException) { } catch (UnauthorizedAccessException) { }
    }

    // ---- the two outcomes ----

    private string Volume => Path.Combine(_out, "vol.nii.gz");

    private string[] Outputs => [Volume, Path.Combine(_out, "vol.json"), Path.Combine(_out, "vol.report.html")];

    /// <summary>A build of <paramref name="series"/> into <see cref="Volume"/> with the given extra options.</summary>
    private string[] Build(string series, params string[] extra) =>
        ["build", series, "-o", Volume, "--pixel-size", "10", "--spacing", "50", "--work-size", "64", "--fill", "none", .. extra];

    /// <summary>
    /// Runs a command that must be refused; returns its one error line. With <paramref name="afterListing"/>, a build calls
    /// it once the series is listed (to change an input then); the inputs must then be as it left them.
    /// </summary>
    private string Refused(string[] args, int code, string names, string problem, string[]? outputs = null, Action<Series.SectionSeries>? afterListing = null)
    {
        var inputs = Snapshot(_in);
        var outFolder = Snapshot(_out);
        var hooks = afterListing is null ? Cli.CliHooks.None : new Cli.CliHooks(series => { afterListing(series); inputs = Snapshot(_in); });
        var (exit, _, stderr) = CliRun.Run(hooks, args);
        _log.WriteLine($"exit {exit}: {stderr.Trim()}");
        Assert.True(exit == code, $"exit code {exit}, expected {code} (README): {stderr}");
        var line = Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries));
        Assert.StartsWith("error: ", line);
        Assert.Contains(names, line);
        Assert.Matches(problem, line);
        int dash = line.IndexOf(" — ", StringComparison.Ordinal);
        Assert.True(dash > 0 && line.Length - dash > 10, $"the line does not say what to do: {line}");
        Assert.DoesNotContain("System.", line); // no .NET type names
        Assert.Equal(inputs, Snapshot(_in)); // inputs byte for byte unchanged
        foreach (var o in outputs ?? Outputs) Assert.False(Path.Exists(o), $"{o} was left behind");
        Assert.Equal(outFolder, Snapshot(_out)); // nothing new beside the outputs either (no .part files)
        return line;
    }

    /// <summary>Runs a build that must succeed; checks the inputs are unchanged and returns stdout and nibabel's view of the volume.</summary>
    private (string Out, JsonElement Nibabel) Accepted(string[] args)
    {
        var inputs = Snapshot(_in);
        var (exit, stdout, stderr) = CliRun.Run(args);
        _log.WriteLine($"exit {exit}: {stdout.Trim()} {stderr.Trim()}");
        Assert.True(exit == 0, $"exit code {exit}: {stderr}");
        Assert.Equal(inputs, Snapshot(_in));
        foreach (var o in Outputs) Assert.True(File.Exists(o), $"{o} is missing");
        Assert.DoesNotContain(Directory.GetFiles(_out), f => f.EndsWith(".part", StringComparison.Ordinal));
        var nibabel = NiftiPython.RunJsonList("nibabel_check.py", Volume)[0]; // an outside reader
        return (stdout, nibabel);
    }

    private static SortedDictionary<string, string> Snapshot(string folder)
    {
        var hashes = new SortedDictionary<string, string>(StringComparer.Ordinal);
        foreach (var f in Directory.EnumerateFiles(folder, "*", SearchOption.AllDirectories))
            hashes[Path.GetRelativePath(folder, f)] = Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(f)));
        return hashes;
    }

    private static int[] Shape(JsonElement nibabel) => nibabel.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()).ToArray();

    // ---- making inputs ----

    /// <summary>An 8-bit gray section: bright slide, a dark disc and a small square (so it has a side), moved by <paramref name="shift"/>.</summary>
    private static Image<L8> SectionImage(int width = 64, int height = 64, int shift = 0)
    {
        var image = new Image<L8>(width, height, new L8(230));
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
        {
            int dx = x - width / 2 - shift, dy = y - height / 2;
            if (dx * dx + dy * dy <= 14 * 14 || (x > width / 2 + 8 + shift && x < width / 2 + 16 + shift && y > 6 && y < 14))
                image[x, y] = new L8((byte)(50 + (x * 7 + y * 3) % 40));
        }
        return image;
    }

    private string Folder(string name) => Directory.CreateDirectory(Path.Combine(_in, name)).FullName;

    /// <summary>A series of <paramref name="count"/> good PNG sections s_001.png, s_002.png, …</summary>
    private string Series(string name = "series", int count = 3)
    {
        var folder = Folder(name);
        for (int n = 1; n <= count; n++)
        {
            using var image = SectionImage(shift: n);
            image.SaveAsPng(Path.Combine(folder, $"s_{n:000}.png"));
        }
        return folder;
    }

    private static byte[] PngBytes(Image image)
    {
        using var ms = new MemoryStream();
        image.SaveAsPng(ms);
        return ms.ToArray();
    }

    /// <summary>
    /// A minimal little-endian TIFF (TIFF 6.0: one uncompressed strip, one sample per pixel, BlackIsZero) that declares
    /// <paramref name="width"/> × <paramref name="height"/> pixels of <paramref name="bits"/> bits in the given SampleFormat
    /// (1 unsigned, 3 IEEE float), followed by <paramref name="data"/> whatever its length (Deflate-compressed when
    /// <paramref name="deflated"/>, compression 8 in TIFF Technical Note 2; its strip byte count is then the data's length).
    /// </summary>
    private static byte[] Tiff(int width, int height, int bits, int sampleFormat, byte[] data, bool deflated = false)
    {
        uint stripBytes = deflated ? (uint)data.Length : (uint)((long)width * height * bits / 8);
        (ushort Tag, ushort Type, uint Value)[] entries =
        [
            (256, 4, (uint)width), (257, 4, (uint)height), (258, 3, (uint)bits), (259, 3, deflated ? 8u : 1u), (262, 3, 1),
            (273, 4, 0), (277, 3, 1), (278, 4, (uint)height), (279, 4, stripBytes), (339, 3, (uint)sampleFormat),
        ];
        int ifdSize = 2 + 12 * entries.Length + 4;
        uint dataOffset = (uint)(8 + ifdSize);
        var bytes = new byte[dataOffset + data.Length];
        "II"u8.CopyTo(bytes);
        BinaryPrimitives.WriteUInt16LittleEndian(bytes.AsSpan(2), 42);
        BinaryPrimitives.WriteUInt32LittleEndian(bytes.AsSpan(4), 8);
        BinaryPrimitives.WriteUInt16LittleEndian(bytes.AsSpan(8), (ushort)entries.Length);
        for (int e = 0; e < entries.Length; e++)
        {
            var at = bytes.AsSpan(10 + 12 * e);
            uint value = entries[e].Tag == 273 ? dataOffset : entries[e].Value;
            BinaryPrimitives.WriteUInt16LittleEndian(at, entries[e].Tag);
            BinaryPrimitives.WriteUInt16LittleEndian(at[2..], entries[e].Type);
            BinaryPrimitives.WriteUInt32LittleEndian(at[4..], 1);
            if (entries[e].Type == 3) BinaryPrimitives.WriteUInt16LittleEndian(at[8..], (ushort)value);
            else BinaryPrimitives.WriteUInt32LittleEndian(at[8..], value);
        }
        data.CopyTo(bytes, (int)dataOffset);
        return bytes;
    }

    private static byte[] FloatTiff(int width, int height, Func<int, int, float> value)
    {
        var data = new byte[width * height * 4];
        for (int y = 0; y < height; y++)
        for (int x = 0; x < width; x++)
            BinaryPrimitives.WriteSingleLittleEndian(data.AsSpan(4 * (y * width + x)), value(x, y));
        return Tiff(width, height, 32, 3, data);
    }

    /// <summary>PNG chunk: length, type, data, CRC-32 over type and data (PNG specification, ISO/IEC 15948 §5.3).</summary>
    private static void Chunk(Stream s, string type, byte[] data)
    {
        Span<byte> four = stackalloc byte[4];
        BinaryPrimitives.WriteUInt32BigEndian(four, (uint)data.Length);
        s.Write(four);
        var typed = Encoding.ASCII.GetBytes(type).Concat(data).ToArray();
        s.Write(typed);
        BinaryPrimitives.WriteUInt32BigEndian(four, Crc32(typed));
        s.Write(four);
    }

    private static uint Crc32(byte[] bytes)
    {
        uint crc = 0xFFFFFFFF;
        foreach (byte b in bytes)
        {
            crc ^= b;
            for (int k = 0; k < 8; k++) crc = (crc & 1) != 0 ? 0xEDB88320 ^ (crc >> 1) : crc >> 1;
        }
        return ~crc;
    }

    /// <summary>A PNG whose header (IHDR) declares <paramref name="width"/> × <paramref name="height"/> 8-bit gray pixels, with a tiny data chunk.</summary>
    private static byte[] PngDeclaring(int width, int height)
    {
        using var ms = new MemoryStream();
        ms.Write([0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A]);
        var ihdr = new byte[13];
        BinaryPrimitives.WriteInt32BigEndian(ihdr, width);
        BinaryPrimitives.WriteInt32BigEndian(ihdr.AsSpan(4), height);
        ihdr[8] = 8; // bit depth; colour type 0 (gray), deflate, filter 0, no interlace
        Chunk(ms, "IHDR", ihdr);
        Chunk(ms, "IDAT", [0x78, 0x9C, 0x63, 0x00, 0x00, 0x00, 0x01, 0x00, 0x01]); // zlib of one zero byte
        Chunk(ms, "IEND", []);
        return ms.ToArray();
    }

    /// <summary>A small template volume written by our writer (qform and sform both set), as bytes of a .nii file.</summary>
    private byte[] TemplateBytes()
    {
        var path = Path.Combine(_root, "template-source.nii");
        var volume = NiftiPhantom.Make(32, 32, 8, Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.1, 32, 32, 8),
            (i, j, k) => (i - 16) * (i - 16) + (j - 16) * (j - 16) < 100 ? 50 : 200 + k);
        NiftiFile.Write(path, volume, new NiftiWriteOptions { DataType = NiftiDataType.UInt8 });
        var bytes = File.ReadAllBytes(path);
        File.Delete(path);
        return bytes;
    }

    private string WriteInput(string relative, byte[] bytes)
    {
        var path = Path.Combine(_in, relative);
        Directory.CreateDirectory(Path.GetDirectoryName(path)!);
        File.WriteAllBytes(path, bytes);
        return path;
    }

    private string Manifest(string folder, string text, Encoding? encoding = null)
    {
        var path = Path.Combine(folder, "manifest.csv");
        File.WriteAllBytes(path, (encoding ?? new UTF8Encoding(false)).GetBytes(text));
        return path;
    }

    // ---- section images ----

    [Fact]
    public void BadInput_ZeroByteImage()
    {
        var series = Series();
        var empty = WriteInput("series/s_004.png", []);
        Refused(Build(series), 1, empty, "the file is empty");
    }

    [Fact]
    public void BadInput_TruncatedPng()
    {
        var series = Series();
        var path = Path.Combine(series, "s_002.png");
        File.WriteAllBytes(path, File.ReadAllBytes(path)[..80]); // IHDR intact, the data cut off
        Refused(Build(series), 1, path, "cannot be decoded|truncated|incomplete");
    }

    [Fact]
    public void BadInput_TruncatedTiff()
    {
        var series = Series();
        var data = new byte[64 * 64];
        Array.Fill(data, (byte)200);
        var path = WriteInput("series/s_004.tif", Tiff(64, 64, 8, 1, data)[..(150 + 64 * 10)]); // strip stops after 10 rows
        Refused(Build(series), 1, path, "cannot be decoded|truncated|strip|short");
    }

    [Fact]
    public void BadInput_TruncatedJpeg()
    {
        var series = Series();
        using var image = SectionImage();
        using var ms = new MemoryStream();
        image.SaveAsJpeg(ms);
        var bytes = ms.ToArray();
        var path = WriteInput("series/s_004.jpg", bytes[..(bytes.Length / 2)]);
        Refused(Build(series), 1, path, "truncated|cannot be decoded");
    }

    [Fact]
    public void BadInput_PngCorruptedInTheMiddle()
    {
        var series = Series();
        var path = Path.Combine(series, "s_002.png");
        var bytes = File.ReadAllBytes(path);
        for (int i = bytes.Length / 2 - 8; i < bytes.Length / 2 + 8; i++) bytes[i] ^= 0xA5; // inside the compressed data
        File.WriteAllBytes(path, bytes);
        Refused(Build(series), 1, path, "cannot be decoded|damaged|checksum|CRC");
    }

    [Fact]
    public void BadInput_TextFileNamedPng()
    {
        var series = Series();
        var path = WriteInput("series/s_004.png", "section notes: torn at the edge\n"u8.ToArray());
        Refused(Build(series), 1, path, "not a readable PNG, TIFF or JPEG");
    }

    [Fact]
    public void BadInput_RandomBytesNamedTiff()
    {
        var series = Series();
        var junk = new byte[5000];
        new Random(18).NextBytes(junk);
        var path = WriteInput("series/s_004.tif", junk);
        Refused(Build(series), 1, path, "not a readable PNG, TIFF or JPEG");
    }

    [Fact]
    public void BadInput_TiffSignatureWithGarbageAfterIt()
    {
        var series = Series();
        var junk = new byte[3000];
        new Random(7).NextBytes(junk);
        "II*\0"u8.CopyTo(junk);
        var path = WriteInput("series/s_004.tif", junk);
        Refused(Build(series), 1, path, "TIFF|cannot be read");
    }

    [Fact]
    public void BadInput_PngOfAnotherKindUnderAJpegName_IsReadByItsContent()
    {
        // Accepted: the format is told by the file's signature, not its extension.
        var series = Series();
        File.Move(Path.Combine(series, "s_003.png"), Path.Combine(series, "s_003.jpg"));
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(3, Shape(nibabel)[2]);
    }

    [Fact]
    public void BadInput_PngHeaderDeclaringAGiganticSize()
    {
        var series = Series();
        var path = WriteInput("series/s_004.png", PngDeclaring(100_000, 100_000)); // 10¹⁰ pixels in 70 bytes
        Refused(Build(series), 1, path, "declares 100000 × 100000 pixels.*more than the limit");
    }

    [Fact]
    public void BadInput_TiffHeaderDeclaringAGiganticSize()
    {
        var series = Series();
        // A Deflate strip of a few dozen bytes that claims 2.1·10⁹ pixels (over the 2·10⁹ limit): everything the header points at is inside the file.
        using var zlib = new MemoryStream();
        using (var z = new System.IO.Compression.ZLibStream(zlib, System.IO.Compression.CompressionLevel.SmallestSize, leaveOpen: true))
            z.Write(new byte[46_000]);
        var path = WriteInput("series/s_004.tif", Tiff(46_000, 46_000, 8, 1, zlib.ToArray(), deflated: true));
        Refused(Build(series), 1, path, "declares 46000 × 46000 pixels.*more than the limit");
    }

    [Fact]
    public void BadInput_FloatTiffWithNaN()
    {
        var series = Series();
        var path = WriteInput("series/s_004.tif", FloatTiff(64, 64, (x, y) => x == y ? float.NaN : 0.5f));
        Refused(Build(series), 1, path, "floating-point samples");
    }

    [Fact]
    public void BadInput_FloatTiffWithInfinity()
    {
        var series = Series();
        var path = WriteInput("series/s_004.tif", FloatTiff(64, 64, (x, y) => x < 8 ? float.PositiveInfinity : y < 8 ? float.NegativeInfinity : 0.5f));
        Refused(Build(series), 1, path, "floating-point samples");
    }

    [Fact]
    public void BadInput_TwelveBitTiff()
    {
        var series = Series();
        var path = WriteInput("series/s_004.tif", Tiff(64, 64, 12, 1, new byte[64 * 64 * 12 / 8]));
        Refused(Build(series), 1, path, "12 bits per sample, which is not read");
    }

    [Fact]
    public void BadInput_SignedSixteenBitTiff()
    {
        var series = Series();
        var path = WriteInput("series/s_004.tif", Tiff(64, 64, 16, 2, new byte[64 * 64 * 2])); // SampleFormat 2: signed integer
        Refused(Build(series), 1, path, "signed samples, which is not read");
    }

    [Fact]
    public void BadInput_MixedBitDepths()
    {
        var series = Series();
        using var wide = new Image<L16>(64, 64, new L16(50000));
        wide.SaveAsPng(Path.Combine(series, "s_004.png"));
        var line = Refused(Build(series), 1, series, "mix bit depths");
        Assert.Contains("s_004.png", line);
    }

    [Fact]
    public void BadInput_MixedSizes_AreBuiltOnOneGrid()
    {
        var series = Series(count: 2);
        using (var big = SectionImage(96, 72)) big.SaveAsPng(Path.Combine(series, "s_003.png"));
        var (_, nibabel) = Accepted(Build(series, "--no-align", "--no-crop"));
        var shape = Shape(nibabel);
        Assert.Equal(3, shape[2]);
        Assert.True(shape[0] >= 96 && shape[1] >= 72, $"the grid {shape[0]}×{shape[1]} does not hold the largest section"); // nibabel's shape
    }

    [Fact]
    public void BadInput_MixedChannelCounts_ColourIsTakenAsGray()
    {
        var series = Series(count: 2);
        using (var gray = SectionImage(shift: 3))
        using (var colour = gray.CloneAs<Rgb24>())
            colour.SaveAsPng(Path.Combine(series, "s_003.png"));
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(3, Shape(nibabel)[2]);
        Assert.Equal(2, nibabel.GetProperty("datatype").GetInt32()); // NIFTI_TYPE_UINT8 (nifti1.h): 8-bit in, 8-bit out
    }

    // ---- numbering ----

    [Fact]
    public void BadInput_DuplicateNumbersWithoutManifest()
    {
        var series = Series();
        File.Copy(Path.Combine(series, "s_002.png"), Path.Combine(series, "t_002.png"));
        var line = Refused(Build(series), 1, Path.Combine(series, "s_002.png"), "has section number 2");
        Assert.Contains("t_002.png", line);
    }

    [Fact]
    public void BadInput_DuplicateNumbersInManifest()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file\n1,s_001.png\n2,s_002.png\n2,s_003.png\n");
        Refused(Build(series), 1, manifest + ":4", "section 2 is listed again");
    }

    [Fact]
    public void BadInput_MissingNumbersWithoutManifest_BecomeGaps()
    {
        var series = Series(count: 4);
        File.Delete(Path.Combine(series, "s_003.png"));
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(4, Shape(nibabel)[2]); // sections 1, 2, (3), 4
        var sidecar = JsonDocument.Parse(File.ReadAllText(Outputs[1])).RootElement;
        Assert.Equal(["placed", "placed", "gap", "placed"], sidecar.GetProperty("sections").EnumerateArray().Select(s => s.GetProperty("status").GetString()));
    }

    [Fact]
    public void BadInput_MissingNumbersInManifest_BecomeGaps()
    {
        var series = Series(count: 4);
        File.Delete(Path.Combine(series, "s_003.png"));
        Manifest(series, "section,file,note\n1,s_001.png,\n2,s_002.png,\n3,,lost\n4,s_004.png,\n5,,lost at the end\n");
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(5, Shape(nibabel)[2]);
        var sidecar = JsonDocument.Parse(File.ReadAllText(Outputs[1])).RootElement;
        Assert.Equal("gap", sidecar.GetProperty("sections")[2].GetProperty("status").GetString());
    }

    [Fact]
    public void BadInput_ImageWithoutANumberInItsName()
    {
        var series = Series();
        File.Copy(Path.Combine(series, "s_001.png"), Path.Combine(series, "overview.png"));
        Refused(Build(series), 1, Path.Combine(series, "overview.png"), "has no section number in its name");
    }

    [Fact]
    public void BadInput_NumbersSpanningAMillion()
    {
        var series = Series(count: 2);
        File.Copy(Path.Combine(series, "s_001.png"), Path.Combine(series, "s_1000000.png"));
        Refused(Build(series), 1, series, "section numbers run from 1 .* to 1000000");
    }

    // ---- manifests ----

    [Fact]
    public void BadInput_ManifestWithAnUnknownColumn()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,stain\n1,s_001.png,nissl\n2,s_002.png,nissl\n3,s_003.png,nissl\n");
        Refused(Build(series), 1, manifest + ":1", "unknown column 'stain'");
    }

    [Fact]
    public void BadInput_ManifestWithABadSectionNumber()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file\n1,s_001.png\ntwo,s_002.png\n3,s_003.png\n");
        Refused(Build(series), 1, manifest + ":3", "section 'two' is not a whole number");
    }

    [Fact]
    public void BadInput_ManifestWithABadPixelSize()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,pixel_size_um\n1,s_001.png,10\n2,s_002.png,-4\n3,s_003.png,10\n");
        Refused(Build(series), 1, manifest + ":3", "pixel_size_um '-4' is not a positive number");
    }

    [Fact]
    public void BadInput_ManifestWithADecimalComma()
    {
        var series = Series();
        var manifest = Manifest(series, "#! spacing_um = 50,5\nsection,file\n1,s_001.png\n2,s_002.png\n3,s_003.png\n");
        Refused(["build", series, "-o", Volume, "--pixel-size", "10"], 1, manifest + ":1", "spacing_um needs a positive number");
    }

    [Fact]
    public void BadInput_ManifestInLatin1()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,note\n1,s_001.png,d\u00e9chir\u00e9\n2,s_002.png,\n3,s_003.png,\n", Encoding.Latin1);
        Refused(Build(series), 1, manifest, "is not UTF-8 text");
    }

    [Fact]
    public void BadInput_ManifestInUtf16()
    {
        var series = Series();
        var manifest = Manifest(series, "\uFEFFsection,file\n1,s_001.png\n2,s_002.png\n3,s_003.png\n", Encoding.Unicode);
        Refused(Build(series), 1, manifest, "is UTF-16 text");
    }

    [Fact]
    public void BadInput_ManifestWithAByteOrderMark_IsRead()
    {
        // Accepted: spreadsheets save "CSV UTF-8" with a BOM. The manifest's spacing (80 µm) must reach the volume.
        var series = Series();
        File.WriteAllBytes(Path.Combine(series, "manifest.csv"), [0xEF, 0xBB, 0xBF, .. "#! spacing_um = 80\nsection,file\n1,s_001.png\n2,s_002.png\n3,s_003.png\n"u8]);
        Assert.Equal(0xEF, File.ReadAllBytes(Path.Combine(series, "manifest.csv"))[0]);
        var (_, nibabel) = Accepted(["build", series, "-o", Volume, "--pixel-size", "10", "--no-align"]);
        Assert.Equal(0.08, nibabel.GetProperty("zooms")[2].GetDouble(), 6); // nibabel's voxel size along the stack, mm
    }

    [Fact]
    public void BadInput_ManifestWithWindowsLineEndings_IsRead()
    {
        var series = Series();
        Manifest(series, "section,file,mirrored\r\n1,s_001.png,no\r\n2,s_002.png,yes\r\n3,s_003.png,\r\n");
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(3, Shape(nibabel)[2]);
    }

    [Fact]
    public void BadInput_ManifestNamingAFileThatDoesNotExist()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file\n1,s_001.png\n2,s_002.png\n3,s_003.png\n4,s_004.png\n");
        Refused(Build(series), 1, manifest + ":5", "the file 's_004.png' does not exist");
    }

    [Fact]
    public void BadInput_ManifestWithAnUnclosedQuote()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,note\n1,s_001.png,\"torn, folded\n2,s_002.png,\n3,s_003.png,\n");
        Refused(Build(series), 1, manifest + ":2", "quote opened at column .* is not closed");
    }

    [Fact]
    public void BadInput_ManifestSeparatedBySemicolons()
    {
        var series = Series();
        var manifest = Manifest(series, "section;file\n1;s_001.png\n2;s_002.png\n3;s_003.png\n");
        Refused(Build(series), 1, manifest + ":1", "separated by semicolons");
    }

    [Fact]
    public void BadInput_ManifestThatIsEmpty_FilesAreFoundByName()
    {
        // Accepted: a zero-byte manifest holds no table, so the files are numbered by name.
        var series = Series();
        Manifest(series, "");
        var (_, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(3, Shape(nibabel)[2]);
    }

    [Fact]
    public void BadInput_ManifestPositionsGoingBackwards()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,position_um\n1,s_001.png,0\n2,s_002.png,100\n3,s_003.png,60\n");
        Refused(Build(series), 1, manifest + ":4", "position_um 60 does not increase from 100");
    }

    [Fact]
    public void BadInput_ManifestGivenAsTheSeriesNamingAMissingFile()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file\n1,s_001.png\n2,s_002.png\n3,s_03.png\n");
        Refused(Build(manifest), 1, manifest + ":4", "the file 's_03.png' does not exist");
    }

    [Fact]
    public void BadInput_DamagedFileOfAnExcludedSection_IsSkippedWithAWarning()
    {
        // Accepted: a section the manifest excludes is not needed, so its unreadable file only gives a warning.
        var series = Series(count: 4);
        File.WriteAllBytes(Path.Combine(series, "s_003.png"), "not an image"u8.ToArray());
        Manifest(series, "section,file,exclude\n1,s_001.png,\n2,s_002.png,\n3,s_003.png,yes\n4,s_004.png,\n");
        var (stdout, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Equal(4, Shape(nibabel)[2]);
        Assert.Contains("s_003.png: is not a readable PNG, TIFF or JPEG image (its header is not recognised) (the section is excluded, so the run goes on)", stdout);
    }

    // ---- paths and series shapes ----

    [Fact]
    public void BadInput_PathsWithSpacesAndNonAscii_AreBuilt()
    {
        var series = Series("séries coupées 2026 (ñ)");
        var output = Path.Combine(_out, "vol.nii.gz");
        var (stdout, nibabel) = Accepted(Build(series, "--no-align"));
        Assert.Contains(output, stdout);
        Assert.Equal([64, 64, 3], Shape(nibabel));
    }

    [Fact]
    public void BadInput_OutputPathWithSpacesAndNonAscii_IsWritten()
    {
        var series = Series();
        var folder = Directory.CreateDirectory(Path.Combine(_out, "résultats d'été")).FullName;
        var output = Path.Combine(folder, "volume ß 1.nii.gz");
        var (exit, _, stderr) = CliRun.Run(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50", "--no-align"]);
        Assert.True(exit == 0, stderr);
        var nibabel = NiftiPython.RunJsonList("nibabel_check.py", output)[0]; // nibabel opens the non-ASCII path
        Assert.Equal([64, 64, 3], Shape(nibabel));
        Assert.True(File.Exists(Path.Combine(folder, "volume ß 1.json")));
    }

    [Fact]
    public void BadInput_SeriesOfOneSection()
    {
        var series = Series(count: 1);
        var (_, nibabel) = Accepted(Build(series));
        Assert.Equal(1, Shape(nibabel)[2]);
    }

    [Fact]
    public void BadInput_AllSectionsBlank()
    {
        var series = Folder("blank");
        for (int n = 1; n <= 3; n++)
        {
            using var image = new Image<L8>(64, 64, new L8(230));
            image.SaveAsPng(Path.Combine(series, $"s_{n:000}.png"));
        }
        var (stdout, nibabel) = Accepted(Build(series));
        Assert.Equal(3, Shape(nibabel)[2]);
        Assert.Matches("warning|Check", stdout); // blank sections cannot be aligned with confidence: the build says so
    }

    [Fact]
    public void BadInput_SeriesFolderThatDoesNotExist()
    {
        var missing = Path.Combine(_in, "no such series");
        Refused(Build(missing), 1, missing, "does not exist");
    }

    [Fact]
    public void BadInput_EmptySeriesFolder()
    {
        var empty = Folder("empty");
        Refused(Build(empty), 1, empty, "no section images");
    }

    [Fact]
    public void BadInput_OneImageGivenAsTheSeries()
    {
        var series = Series();
        var image = Path.Combine(series, "s_001.png");
        Refused(Build(image), 1, image, "single image, not a series");
    }

    [Fact]
    public void BadInput_EverySectionExcluded()
    {
        var series = Series();
        var manifest = Manifest(series, "section,file,exclude\n1,s_001.png,yes\n2,s_002.png,yes\n3,s_003.png,yes\n");
        Refused(Build(series), 1, manifest, "every section is excluded or lost");
    }

    // ---- inputs changed while a build runs ----
    // The build lists the series (headers only) and reads the pixels later; the hook changes a file in between, at the
    // same point every run, instead of racing a build from another process.

    [Fact]
    public void BadInput_SectionRemovedAfterTheSeriesWasListed()
    {
        var series = Series(count: 4);
        var removed = Path.Combine(series, "s_003.png");
        Refused(Build(series), 1, "s_003.png", "was removed after the series was listed.* — put it back .*then run the build again",
            afterListing: listed =>
            {
                Assert.Contains(listed.Sections, s => s.FilePath == removed); // it was listed
                File.Delete(removed);
            });
    }

    [Fact]
    public void BadInput_SectionTruncatedAfterTheSeriesWasListed()
    {
        var series = Series(count: 4);
        var truncated = Path.Combine(series, "s_002.png");
        long length = new FileInfo(truncated).Length;
        Refused(Build(series), 1, "s_002.png", $@"changed after the series was listed \(it had {length:N0} bytes then and has {length / 2:N0} now\)",
            afterListing: _ =>
            {
                using var file = new FileStream(truncated, FileMode.Open, FileAccess.Write);
                file.SetLength(length / 2);
            });
    }

    [Fact]
    public void BadInput_SectionWrittenOverWithTheSameLengthAfterTheSeriesWasListed()
    {
        // The same bytes written again: the same length, a later last write time (a second on, as a copy made a moment later
        // would leave it).
        var series = Series(count: 3);
        var rewritten = Path.Combine(series, "s_001.png");
        var bytes = File.ReadAllBytes(rewritten);
        Refused(Build(series), 1, "s_001.png", "was written to after the series was listed",
            afterListing: _ =>
            {
                File.WriteAllBytes(rewritten, bytes);
                File.SetLastWriteTimeUtc(rewritten, File.GetLastWriteTimeUtc(rewritten).AddSeconds(1)); // as a copy a moment later would
            });
    }

    [Fact]
    public void BadInput_SectionTruncatedBetweenItsTwoReads_IsRefusedAtTheSecond()
    {
        // The build reads every section twice (reduced for registration, then for the output): a file truncated after its
        // first read is refused at its second, which comes before anything is written.
        var series = Series(count: 3);
        var opened = StackBuild.Series.SeriesReader.Open(series, new StackBuild.Series.SeriesOptions { PixelSizeUm = 10, SpacingUm = 50 });
        var target = opened.Sections[1];
        var images = new TruncateAfterFirstRead(target.FilePath!);
        var thrown = Record.Exception(() => StackBuild.Pipeline.BuildPipeline.Run(
            new StackBuild.Pipeline.BuildOptions { Input = series, Registration = new StackBuild.Register.RegistrationOptions { WorkSize = 64 } }, opened, images));
        // Sections are read in parallel: the problem may come wrapped.
        var problem = Assert.IsType<IO.InputProblemException>(thrown is AggregateException many ? Assert.Single(many.Flatten().InnerExceptions) : thrown);
        _log.WriteLine(problem.Message);
        Assert.Equal(2, images.Reads); // the first read, then the refused second
        Assert.Equal(target.FilePath, problem.File);
        Assert.Matches("changed after the series was listed", problem.Message);
    }

    /// <summary>The files of a series, with one of them cut to half its length just after it was first read.</summary>
    private sealed class TruncateAfterFirstRead(string path) : StackBuild.Pipeline.ISectionImages
    {
        public int Reads;

        public Imaging.LoadedSection Read(StackBuild.Series.SectionEntry section, Imaging.ImageReadOptions options)
        {
            if (section.FilePath != path) return StackBuild.Pipeline.SectionFiles.Instance.Read(section, options);
            Interlocked.Increment(ref Reads);
            var loaded = StackBuild.Pipeline.SectionFiles.Instance.Read(section, options);
            using var file = new FileStream(path, FileMode.Open, FileAccess.Write);
            file.SetLength(file.Length / 2);
            return loaded;
        }
    }

    // ---- template volumes ----

    [Fact]
    public void BadInput_TemplateWithQformAndSformDisagreeing_UsesTheSformAndSaysSo()
    {
        var series = Series();
        var bytes = TemplateBytes();
        // Move the sform's origin 5 mm along x (srow_x[3] at byte 292, nifti1.h), leaving the qform as it was.
        float x0 = BinaryPrimitives.ReadSingleLittleEndian(bytes.AsSpan(292));
        BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(292), x0 + 5);
        var template = WriteInput("template.nii", bytes);
        var reference = NiftiPython.RunJsonList("nibabel_check.py", template)[0];
        double qx = reference.GetProperty("qform")[0][3].GetDouble(), sx = reference.GetProperty("affine")[0][3].GetDouble();
        Assert.Equal(5, sx - qx, 3); // nibabel reads the two disagreeing by 5 mm, and takes the sform as the affine
        var (stdout, _) = Accepted(Build(series, "--template", template));
        Assert.Contains($"warning: {template}: its qform and sform disagree by up to 5 mm; the sform is used", stdout);
    }

    [Fact]
    public void BadInput_TemplateWithZeroVoxelSize()
    {
        var series = Series();
        var bytes = TemplateBytes();
        for (int c = 0; c < 3; c++) BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(280 + 4 * c), 0f); // srow_x = 0 0 0 (nifti1.h)
        var template = WriteInput("template.nii", bytes);
        Refused(Build(series, "--template", template), 1, template, "singular \\(zero voxel size\\)");
    }

    [Fact]
    public void BadInput_TemplateWithAWrongVoxOffset()
    {
        var series = Series();
        var bytes = TemplateBytes();
        BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(108), 1_000_000f); // vox_offset far beyond the end
        var template = WriteInput("template.nii", bytes);
        Refused(Build(series, "--template", template), 1, template, "the file is too short");
    }

    [Fact]
    public void BadInput_TemplateWithTruncatedData()
    {
        var series = Series();
        var bytes = TemplateBytes();
        var template = WriteInput("template.nii", bytes[..(352 + 32 * 32 * 3)]); // 3 of its 8 planes
        Refused(Build(series, "--template", template), 1, template, "the file is too short");
    }

    [Fact]
    public void BadInput_TemplateThatIsASectionImage()
    {
        var series = Series();
        var template = WriteInput("template.nii.gz", File.ReadAllBytes(Path.Combine(series, "s_001.png")));
        Refused(Build(series, "--template", template), 1, template, "is a PNG image, not a NIfTI-1 volume");
    }

    [Fact]
    public void BadInput_TemplateThatIsEmpty()
    {
        var series = Series();
        var template = WriteInput("template.nii", []);
        Refused(Build(series, "--template", template), 1, template, "empty|short|not a NIfTI-1");
    }

    // ---- outputs ----

    [Fact]
    public void BadInput_UnwritableOutputFolder()
    {
        var series = Series();
        var locked = Directory.CreateDirectory(Path.Combine(_out, "locked")).FullName;
        var output = Path.Combine(locked, "vol.nii.gz");
        using (Unwritable(locked))
        {
            Refused(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50"], 1, output, "cannot write in the folder",
                [output, Path.Combine(locked, "vol.json"), Path.Combine(locked, "vol.report.html")]);
            Assert.Empty(Directory.GetFileSystemEntries(locked));
        }
    }

    [Fact]
    public void BadInput_OutputPathThatIsAFolder()
    {
        var series = Series();
        var folder = Directory.CreateDirectory(Path.Combine(_out, "vol.nii.gz")).FullName;
        Refused(Build(series), 1, folder, "would replace a folder", [Outputs[1], Outputs[2]]);
        Assert.Empty(Directory.GetFileSystemEntries(folder));
    }

    [Fact]
    public void BadInput_OutputFolderThatDoesNotExist()
    {
        var series = Series();
        var output = Path.Combine(_out, "not made yet", "vol.nii.gz");
        Refused(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50"], 1, output, "folder for this output does not exist", [output]);
    }

    [Fact]
    public void BadInput_OutputThatIsNotNifti()
    {
        var series = Series();
        var output = Path.Combine(_out, "vol.png");
        Refused(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50"], 1, output, "must be a NIfTI-1 file", [output]);
    }

    [Fact]
    public void BadInput_OmeZarrOutputFolderHoldingOtherFiles()
    {
        var series = Series();
        var folder = Directory.CreateDirectory(Path.Combine(_out, "vol.ome.zarr")).FullName;
        File.WriteAllText(Path.Combine(folder, "notes.txt"), "mine");
        // Refused checks that the folder's file is byte for byte as it was (the output folder's snapshot).
        Refused(["build", series, "-o", folder, "--pixel-size", "10", "--spacing", "50"], 1, folder, "holds something StackBuild did not write",
            [Outputs[1], Outputs[2]]);
        Assert.Equal(["notes.txt"], Directory.GetFileSystemEntries(folder).Select(Path.GetFileName));
    }

    [Theory]
    [InlineData("info")]
    [InlineData("view")]
    public void BadInput_OmeZarrImageGivenToACommandThatReadsNifti(string command)
    {
        // Any folder named so stands for an image here; the commands refuse before looking inside.
        var image = Directory.CreateDirectory(Path.Combine(_in, "vol.ome.zarr")).FullName;
        File.WriteAllText(Path.Combine(image, ".zgroup"), "{\"zarr_format\": 2}\n");
        Refused([command, image], 1, image, "OME-Zarr image, which StackBuild writes but does not read", []);
    }

    [Fact]
    public void BadInput_ZarrOutputNotNamedOmeZarr()
    {
        var series = Series();
        var output = Path.Combine(_out, "vol.zarr");
        Refused(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50"], 1, output, "must end in .ome.zarr", [output]);
    }

    [Fact]
    public void BadInput_ResliceIntoAnUnwritableFolder()
    {
        var series = Series();
        Assert.Equal(0, CliRun.Run(Build(series, "--no-align")).Code);
        var locked = Directory.CreateDirectory(Path.Combine(_out, "locked")).FullName;
        var png = Path.Combine(locked, "plane.png");
        using (Unwritable(locked))
            Refused(["reslice", Volume, "-o", png], 1, png, "cannot write in the folder", [png]);
    }

    [Fact]
    public void BadInput_FullDisk()
    {
        // Three sections of noise (incompressible): a volume of about 200 KB, onto a file system of 64 KB made here.
        var series = Folder("noise");
        var random = new Random(18);
        for (int n = 1; n <= 3; n++)
        {
            var pixels = new byte[256 * 256];
            random.NextBytes(pixels);
            using var image = Image.LoadPixelData<L8>(pixels, 256, 256);
            image.SaveAsPng(Path.Combine(series, $"s_{n:000}.png"));
        }
        var small = Directory.CreateDirectory(Path.Combine(_out, "small disk")).FullName;
        var (mounted, _, why) = NiftiPython.Process("mount", ["-t", "tmpfs", "-o", "size=64k", "tmpfs", small]);
        Assert.True(mounted == 0, $"mount -t tmpfs failed ({why.Trim()}): this test makes a small file system and needs root");
        try
        {
            var output = Path.Combine(small, "vol.nii.gz");
            var line = Refused(["build", series, "-o", output, "--pixel-size", "10", "--spacing", "50", "--no-align", "--no-crop"], 3, output,
                "could not be written \\(No space left on device\\); nothing was left at this path",
                [output, Path.Combine(small, "vol.json"), Path.Combine(small, "vol.report.html")]);
            Assert.DoesNotContain(".part", line);
            Assert.Empty(Directory.GetFileSystemEntries(small));
        }
        finally
        {
            NiftiPython.Process("umount", [small]);
        }
    }

    /// <summary>
    /// Makes a folder unwritable until disposed: mode 555 for an ordinary user; for root, who ignores modes, the
    /// immutable attribute (chattr +i, Debian e2fsprogs).
    /// </summary>
    private static IDisposable Unwritable(string folder)
    {
        if (OperatingSystem.IsLinux() && Environment.UserName != "root")
        {
            File.SetUnixFileMode(folder, UnixFileMode.UserRead | UnixFileMode.UserExecute);
            return new Undo(() =>
            {
                if (OperatingSystem.IsLinux()) File.SetUnixFileMode(folder, UnixFileMode.UserRead | UnixFileMode.UserWrite | UnixFileMode.UserExecute);
            });
        }
        var (exit, _, err) = NiftiPython.Process("chattr", ["+i", folder]);
        Assert.True(exit == 0, $"chattr +i failed ({err.Trim()}): the test needs e2fsprogs and a file system with the immutable attribute");
        return new Undo(() => NiftiPython.Process("chattr", ["-i", folder]));
    }

    private sealed class Undo(Action action) : IDisposable
    {
        public void Dispose() => action();
    }

    // ---- the command line ----

    [Fact]
    public void BadInput_TextWhereANumberGoes()
    {
        var series = Series();
        var line = Refused(["build", series, "-o", Volume, "--pixel-size", "abc", "--spacing", "50"], 2, "--pixel-size", "'abc' is not a number");
        Assert.Contains("stackbuild build --help", line);
    }

    [Fact]
    public void BadInput_FractionWhereAWholeNumberGoes()
    {
        var series = Series();
        Refused(Build(series, "--reference", "1.5"), 2, "--reference", "'1.5' is not a whole number");
    }

    [Fact]
    public void BadInput_UnknownOption()
    {
        var series = Series();
        Refused(Build(series, "--pixelsize", "3"), 2, "'--pixelsize' '3'", "are not options or arguments of this command");
    }

    [Fact]
    public void BadInput_NegativePixelSize()
    {
        var series = Series();
        Refused(["build", series, "-o", Volume, "--pixel-size", "-3", "--spacing", "50"], 1, "--pixel-size", "must be a positive number");
    }

    [Fact]
    public void BadInput_ResliceWithoutItsOutput()
    {
        var series = Series();
        Assert.Equal(0, CliRun.Run(Build(series, "--no-align")).Code);
        Refused(["reslice", Volume], 2, "--output", "required", []);
    }

    [Fact]
    public void BadInput_DemoIntoAFolderOfData()
    {
        var series = Series();
        Refused(["demo", series, "--sections", "4", "--size", "48"], 1, series, "not empty and was not made by `stackbuild demo`", []);
    }
}
