using System.Globalization;
using System.Text;
using System.Text.Json;
using System.Text.RegularExpressions;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.Metadata;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;

namespace StackBuild.Demo;

/// <summary>The demo folder's files: PNG encoding, the manifest text and truth.json.</summary>
internal static partial class DemoFiles
{
    public const string TruthFormat = "stackbuild-demo-truth";
    public const string LostNote = "lost during cutting";
    public const string TornNote = "torn: crack with a displaced flap and a missing piece";
    public const string ExcludedNote = "folded edge and a bubble under the coverslip";

    private static readonly JsonSerializerOptions JsonOptions = new()
    {
        WriteIndented = true,
        PropertyNamingPolicy = JsonNamingPolicy.SnakeCaseLower,
        Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping, // a file, not HTML: keep ' and + readable
        Converters = { new OneLine<double[]>(Row), new OneLine<double[][]>(m => "[" + string.Join(", ", m.Select(Row)) + "]"), new OneLine<int[]>(Row) },
    };

    private static string Row(double[] values) => "[" + string.Join(", ", values.Select(v => v.ToString("R", CultureInfo.InvariantCulture))) + "]";

    private static string Row(int[] values) => "[" + string.Join(", ", values.Select(v => v.ToString(CultureInfo.InvariantCulture))) + "]";

    /// <summary>Writes a short array on one line, so matrices stay readable in the indented file.</summary>
    private sealed class OneLine<T>(Func<T, string> format) : System.Text.Json.Serialization.JsonConverter<T>
    {
        public override T Read(ref Utf8JsonReader reader, Type typeToConvert, JsonSerializerOptions options) =>
            throw new NotSupportedException("truth.json is read with JsonDocument");

        public override void Write(Utf8JsonWriter writer, T value, JsonSerializerOptions options) => writer.WriteRawValue(format(value));
    }

    [GeneratedRegex(@"^section_\d+\.png$")]
    private static partial Regex SectionFilePattern();

    /// <summary>8-bit gray PNG of an image holding 0–255 values, with the pixel size in its pHYs chunk.</summary>
    public static byte[] EncodePng(GrayImage image, double pixelSizeUm)
    {
        var bytes = new byte[image.Pixels.Length];
        for (int i = 0; i < bytes.Length; i++) bytes[i] = (byte)Math.Clamp(MathF.Round(image.Pixels[i]), 0, 255);
        using var png = Image.LoadPixelData<L8>(bytes, image.Width, image.Height);
        png.Metadata.ResolutionUnits = PixelResolutionUnit.PixelsPerMeter;
        png.Metadata.HorizontalResolution = png.Metadata.VerticalResolution = 1e6 / pixelSizeUm;
        using var stream = new MemoryStream();
        png.Save(stream, new PngEncoder
        {
            ColorType = PngColorType.Grayscale,
            BitDepth = PngBitDepth.Bit8,
            CompressionLevel = PngCompressionLevel.DefaultCompression,
        });
        return stream.ToArray();
    }

    /// <summary>
    /// The series manifest: comment lines start with <c>#</c>, settings with <c>#!</c>, then a CSV table
    /// <c>section,file,mirrored,exclude,damaged,note</c>. The mirrored column is left empty (unknown):
    /// finding sections mounted face down is the registration's job.
    /// </summary>
    public static string ManifestText(DemoSpecimen specimen)
    {
        var o = specimen.Options;
        var text = new StringBuilder();
        text.Append("# StackBuild demo series: a synthetic tissue block (procedural phantom, no real data), seed ")
            .Append(o.Seed.ToString(CultureInfo.InvariantCulture)).Append(", made by `stackbuild demo`.\n");
        text.Append("# The mirrored column is left empty on purpose: which sections lie face down is for registration to find.\n");
        text.Append("#! pixel_size_um = ").Append(o.PixelSizeUm.ToString(CultureInfo.InvariantCulture)).Append('\n');
        text.Append("#! spacing_um = ").Append(o.SpacingUm.ToString(CultureInfo.InvariantCulture)).Append('\n');
        text.Append("section,file,mirrored,exclude,damaged,note\n");
        foreach (var s in specimen.Sections)
        {
            string note = s.Lost ? LostNote : s.Torn ? TornNote : s.Excluded ? ExcludedNote : "";
            text.Append(s.Number.ToString(CultureInfo.InvariantCulture)).Append(',')
                .Append(Csv(s.FileName ?? "")).Append(',')
                .Append(',') // mirrored: unknown
                .Append(s.Excluded ? "yes" : "").Append(',')
                .Append(s.Torn ? "yes" : "").Append(',')
                .Append(Csv(note)).Append('\n');
        }
        return text.ToString();
    }

    private static string Csv(string field) => Series.SeriesManifest.Quote(field);

    public static string TruthJson(DemoSpecimen specimen)
    {
        var o = specimen.Options;
        var truth = specimen.Truth;
        var sizes = truth.Affine.VoxelSizes;
        var file = new TruthFile(
            TruthFormat,
            1,
            "Ground truth of a StackBuild demo series: a synthetic tissue block (procedural phantom), cut into sections, " +
            "mounted at random (some face down), scanned in brightfield. Lost, torn and excluded sections are flagged.",
            new TruthOptions(o.Seed, o.Sections, o.Size, o.Width, o.Height, o.PixelSizeUm, o.SpacingUm),
            new TruthVolumeInfo(
                DemoSpecimenMaker.TruthVolumeFileName,
                [truth.Nx, truth.Ny, truth.Nz],
                truth.Affine.AxisCodes.Code,
                [sizes.I, sizes.J, sizes.K],
                truth.Affine.ToRows(),
                "float32",
                $"stain density 0-1: 0 no tissue, up to {DemoPhantom.MaxTissueDensity.ToString(CultureInfo.InvariantCulture)} tissue, " +
                $"{DemoPhantom.InkDensity.ToString(CultureInfo.InvariantCulture)} marking ink (on the specimen's right side); " +
                "plane k is section number k+1"),
            "x right, y down, (0,0) at the centre of the top-left pixel; plane_to_image maps truth-plane pixels to image pixels; " +
            "image(p) = truth(plane_to_image^-1 p) sampled bilinearly; plane_to_image is a 3x3 row-major matrix",
            "value = 255 * (offset - gain * truth) + gaussian noise, rounded to 0-255 (8-bit gray PNG)",
            DemoSpecimenMaker.ScanNoiseGrayLevels,
            specimen.Sections.Select(s => new TruthSection(
                s.Number, s.FileName, s.Lost, s.Mirrored, s.Torn, s.Excluded, s.Gain, s.Offset,
                s.Lost ? null : Math.Round(s.PlaneToImage.RotationDegrees, 6),
                s.PlaneToImage.ToRows())).ToList());
        return JsonSerializer.Serialize(file, JsonOptions) + "\n";
    }

    /// <summary>The "format" of a truth.json, or null when the file is missing or not JSON.</summary>
    public static string? ReadTruthFormat(string path)
    {
        try
        {
            if (!File.Exists(path)) return null;
            using var doc = JsonDocument.Parse(File.ReadAllBytes(path));
            return doc.RootElement.ValueKind == JsonValueKind.Object && doc.RootElement.TryGetProperty("format", out var f) &&
                   f.ValueKind == JsonValueKind.String ? f.GetString() : null;
        }
        catch (JsonException)
        {
            return null;
        }
    }

    /// <summary>Section image names listed by an earlier demo's truth.json in this folder (only names we write).</summary>
    public static IReadOnlyList<string> EarlierSectionFiles(string dir)
    {
        var path = Path.Combine(dir, DemoSpecimenMaker.TruthFileName);
        if (ReadTruthFormat(path) != TruthFormat) return [];
        using var doc = JsonDocument.Parse(File.ReadAllBytes(path));
        if (!doc.RootElement.TryGetProperty("sections", out var sections) || sections.ValueKind != JsonValueKind.Array) return [];
        var names = new List<string>();
        foreach (var s in sections.EnumerateArray())
        {
            if (s.ValueKind == JsonValueKind.Object && s.TryGetProperty("file", out var f) && f.ValueKind == JsonValueKind.String &&
                f.GetString() is { } name && SectionFilePattern().IsMatch(name))
                names.Add(name);
        }
        return names;
    }

    private sealed record TruthFile(string Format, int Version, string Description, TruthOptions Options, TruthVolumeInfo TruthVolume,
        string PixelConvention, string ImageModel, double NoiseSdGrayLevels, IReadOnlyList<TruthSection> Sections);

    private sealed record TruthOptions(int Seed, int Sections, int Size, int Width, int Height, double PixelSizeUm, double SpacingUm);

    private sealed record TruthVolumeInfo(string File, int[] Shape, string AxisCodes, double[] VoxelSizeMm, double[][] Affine,
        string Datatype, string Values);

    private sealed record TruthSection(int Number, string? File, bool Lost, bool Mirrored, bool Torn, bool Excluded,
        double Gain, double Offset, double? RotationDegrees, double[][] PlaneToImage);
}
