using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Jpeg;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.IO;

namespace StackBuild.Imaging;

/// <summary>
/// What a section image declares about itself, read from its header without decoding the pixels.
/// <see cref="Channels"/> is 1 for gray, 3 for colour (RGB, palette, YCbCr); an alpha channel is ignored.
/// <see cref="BitsPerChannel"/> is 8 or 16 (PNG gray below 8 bits is widened to 8 by the decoder).
/// <see cref="Format"/> is "PNG", "JPEG", "TIFF" or "TIFF (tiled)".
/// </summary>
/// <see cref="LosslessStrips"/>: a TIFF whose strips LibTiff decodes one at a time to the values ImageSharp gives for the whole image.
public sealed record ImageFacts(int Width, int Height, int BitsPerChannel, int Channels, string Format, bool LosslessStrips = false)
{
    public long PixelCount => (long)Width * Height;
    public int LongSide => Math.Max(Width, Height);
}

/// <summary>Which gray value to take from a colour image. Gray images give their one channel for every choice.</summary>
public enum GrayChannel { Luminance, Red, Green, Blue }

/// <summary>How to load a section image.</summary>
public sealed record ImageReadOptions
{
    public GrayChannel Channel { get; init; } = GrayChannel.Luminance;

    /// <summary>Which page of a multi-page TIFF to read (0 = the first; pages are the images of the first one's size,
    /// see <see cref="SectionImageReader.PageCount"/>). Other formats have only page 0.</summary>
    public int Page { get; init; }

    /// <summary>When set, the image is reduced by area averaging over whole blocks of pixels so its long side is at most this.</summary>
    public int? MaxLongSide { get; init; }

    /// <summary>
    /// An array the returned image takes as its pixels when it holds exactly as many (an earlier image of the caller's that
    /// it no longer needs): a series of images of one size then takes no new memory for each. Null: a new array.
    /// </summary>
    public float[]? Reuse { get; init; }

    /// <summary>Images whose header declares more pixels than this are refused before anything is allocated.</summary>
    public long MaxPixels { get; init; } = DefaultMaxPixels;

    /// <summary>The default <see cref="MaxPixels"/>.</summary>
    public const long DefaultMaxPixels = 2_000_000_000;
}

/// <summary>
/// A loaded section image and the reduction applied. <see cref="Downsample"/> is the integer block size f
/// (full-resolution pixels per returned pixel along each axis; 1 when not reduced). Returned pixel (x', y')
/// averages the full-resolution block starting at (f·x', f·y'), so its centre lies at full-resolution
/// x = f·x' + (f − 1)/2 (same for y). The last column and row average only the pixels that exist, so
/// when the size is not a multiple of f their centres sit slightly nearer the image than that formula says.
/// </summary>
public sealed record LoadedSection(GrayImage Image, double Downsample);

/// <summary>
/// Reads section images (PNG, TIFF including tiled TIFF, JPEG; gray or RGB; 8 or 16 bits per channel) into
/// <see cref="GrayImage"/> values in [0, 1]: 8-bit samples divided by 255, 16-bit samples by 65535. Colour is
/// turned into gray by <see cref="GrayChannel"/>; luminance uses the ITU-R BT.709 luma weights
/// 0.2126 R + 0.7152 G + 0.0722 B on the stored (gamma-encoded) values, as ImageSharp's own gray conversion
/// does (common practice for display-referred images). Every problem with a file is raised as an
/// <see cref="InputProblemException"/> naming the file and what to do.
/// </summary>
public static class SectionImageReader
{
    private static readonly string[] ImageExtensions = [".png", ".tif", ".tiff", ".jpg", ".jpeg"];

    /// <summary>The file name extensions read as section images (compared case-insensitively).</summary>
    public static IReadOnlyList<string> Extensions => ImageExtensions;

    public static bool HasImageExtension(string path)
    {
        var ext = Path.GetExtension(path);
        return ImageExtensions.Any(e => string.Equals(e, ext, StringComparison.OrdinalIgnoreCase));
    }

    /// <summary>Reads the header only. Throws <see cref="InputProblemException"/> for a missing, unreadable or unsupported file.</summary>
    public static ImageFacts Identify(string path)
    {
        if (!File.Exists(path))
            throw new InputProblemException(path, "the file does not exist", "check the file name and folder");
        if (new FileInfo(path).Length == 0)
            throw new InputProblemException(path, "the file is empty (0 bytes)",
                "copy the image again from where it was scanned or exported, or move it out of the series folder");
        try
        {
            using var stream = OpenRead(path);
            var format = Image.DetectFormat(Configuration.Default, stream);
            stream.Position = 0;
            if (format is null)
                throw new InputProblemException(path, "is not a readable PNG, TIFF or JPEG image (its header is not recognised)",
                    "replace it with a readable image or move it out of the series folder");
            var facts = format.Name switch
            {
                "TIFF" => TiffSectionFile.Identify(path, stream),
                "PNG" => IdentifyPng(path, stream),
                "JPEG" => IdentifyJpeg(path, stream),
                _ => throw new InputProblemException(path, $"is a {format.Name} image, which is not read as a section image",
                    "convert it to PNG or TIFF"),
            };
            if (facts.Width <= 0 || facts.Height <= 0)
                throw new InputProblemException(path, $"declares {facts.Width} × {facts.Height} pixels, an image with nothing in it",
                    "its header is damaged; copy the file again from its source or export it again");
            return facts;
        }
        catch (Exception e) when (IsDecoderFailure(e))
        {
            throw new InputProblemException(path, $"cannot be read as an image ({Detail(e)})",
                "replace it with a readable image or move it out of the series folder", e);
        }
    }

    /// <summary>
    /// How many pages the file holds: for TIFF, the image directories of the first image's size (reduced copies such as
    /// pyramid levels and thumbnails are not pages); 1 for PNG and JPEG. Each directory is checked before it is read.
    /// </summary>
    public static int PageCount(string path)
    {
        var facts = Identify(path);
        if (!facts.Format.StartsWith("TIFF", StringComparison.Ordinal)) return 1;
        try
        {
            return TiffSectionFile.PageDirectories(path).Length;
        }
        catch (Exception e) when (IsDecoderFailure(e))
        {
            throw new InputProblemException(path, $"its pages cannot be read ({Detail(e)})",
                "check that the file is complete (copy it again) or export it again", e);
        }
    }

    /// <summary>Reads the image as gray values in [0, 1], reduced when <see cref="ImageReadOptions.MaxLongSide"/> asks.</summary>
    public static GrayImage ReadGray(string path, ImageReadOptions? options = null) => ReadSection(path, options).Image;

    /// <summary>As <see cref="ReadGray"/>, also returning the reduction factor used (see <see cref="LoadedSection"/>).</summary>
    public static LoadedSection ReadSection(string path, ImageReadOptions? options = null)
    {
        options ??= new ImageReadOptions();
        if (options.MaxLongSide is <= 0)
            throw new ArgumentOutOfRangeException(nameof(options), "MaxLongSide must be positive when given.");
        var facts = Identify(path);
        CheckSize(path, facts, options.MaxPixels);
        int factor = options.MaxLongSide is int maxSide ? Math.Max(1, (facts.LongSide + maxSide - 1) / maxSide) : 1;
        long outPixels = (long)((facts.Width + factor - 1) / factor) * ((facts.Height + factor - 1) / factor);
        if (outPixels > Array.MaxLength)
            throw new InputProblemException(path, $"is {facts.Width} × {facts.Height} pixels, too many to hold as one image",
                "read it reduced (a maximum long side) or export it smaller");
        var sink = new BoxDownsampler(facts.Width, facts.Height, factor, options.Reuse);
        try
        {
            if (options.Page > 0)
            {
                if (!facts.Format.StartsWith("TIFF", StringComparison.Ordinal))
                    throw new InputProblemException(path, $"is a {facts.Format} image, which has one page, not {options.Page + 1}",
                        "give an image set whose files all hold the same pages (multi-page TIFF)");
                TiffSectionFile.Read(path, options.Channel, sink, options.Page);
            }
            else if (facts.Format.StartsWith("TIFF", StringComparison.Ordinal))
                ReadTiff(path, facts, options.Channel, sink);
            else
                ReadWithImageSharp(path, facts, options.Channel, sink);
        }
        catch (Exception e) when (IsDecoderFailure(e))
        {
            throw new InputProblemException(path, $"cannot be decoded ({Detail(e)})",
                "check that the file is complete (copy it again) or export it again", e);
        }
        return new LoadedSection(sink.Finish(), factor);
    }

    /// <summary>Refuses an image whose declared size is beyond <paramref name="maxPixels"/>, before any pixel memory is taken.</summary>
    public static void CheckSize(string path, ImageFacts facts, long maxPixels)
    {
        if (facts.PixelCount > maxPixels)
            throw new InputProblemException(path,
                $"declares {facts.Width} × {facts.Height} pixels ({facts.PixelCount:N0}), more than the limit of {maxPixels:N0}",
                "check that the file is not damaged; if the size is right, export the section smaller");
    }

    /// <summary>
    /// Refuses an image whose declared size could not come out of a file this small even at its format's greatest
    /// compression, before the decoder takes memory for its pixels: a damaged header (or a decompression bomb) would
    /// otherwise make the decoder allocate for the declared size before it finds the data missing.
    /// </summary>
    /// <param name="decodedBytes">Bytes the decoder produces for the declared size.</param>
    /// <param name="maxExpansion">Most decoded bytes one stored byte can give in this format.</param>
    /// <param name="compression">The format's compression, for the message.</param>
    internal static void CheckSizeFitsFile(string path, ImageFacts facts, double decodedBytes, long fileLength, double maxExpansion, string compression)
    {
        const double headerSlack = 1 << 16; // headers, palettes and tables, which hold no pixels
        // Beyond the size limit the limit's own message says more (CheckSize, when the pixels are read).
        if (decodedBytes <= maxExpansion * fileLength + headerSlack || facts.PixelCount > ImageReadOptions.DefaultMaxPixels) return;
        throw new InputProblemException(path,
            $"declares {facts.Width} × {facts.Height} pixels, which a file of {fileLength:N0} bytes cannot hold even at the greatest {compression} compression ({maxExpansion:N0}:1)",
            "its header is damaged or the file was cut short; copy the file again from its source or export it again");
    }

    internal static FileStream OpenRead(string path) =>
        new(path, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16);

    private static bool IsDecoderFailure(Exception e) =>
        e is ImageFormatException or NotSupportedException or InvalidDataException or EndOfStreamException
            or IndexOutOfRangeException or ArgumentException or InvalidOperationException
        || e is not OutOfMemoryException && ThrownInsideADecoder(e);

    /// <summary>The decoder's own words for a format problem; for a failure inside it (a null, an overflow), no .NET type names.</summary>
    private static string Detail(Exception e) =>
        e is ImageFormatException or NotSupportedException or InvalidDataException or EndOfStreamException or ArgumentException or InvalidOperationException
            ? e.Message.TrimEnd('.')
            : "the decoder failed on its damaged structure";

    /// <summary>
    /// True when the exception passed through ImageSharp or LibTiff: a decoder that trips over a damaged file (an
    /// overflow, a null, a bad cast in its own code, all found by fuzzing) is a problem with the file, not with StackBuild.
    /// StackBuild's own failures do not pass through them and still surface as such.
    /// </summary>
    private static bool ThrownInsideADecoder(Exception e) =>
        new System.Diagnostics.StackTrace(e, false).GetFrames().Any(f =>
            f.GetMethod()?.DeclaringType?.Assembly is { } a && (a == typeof(Image).Assembly || a == typeof(BitMiracle.LibTiff.Classic.Tiff).Assembly));

    private static ImageFacts IdentifyPng(string path, Stream stream)
    {
        var info = Image.Identify(Configuration.Default, stream) ?? throw NotReadable(path, "PNG");
        var png = info.Metadata.GetPngMetadata();
        int bits = png.BitDepth == PngBitDepth.Bit16 ? 16 : 8;
        int channels = png.ColorType is PngColorType.Grayscale or PngColorType.GrayscaleWithAlpha ? 1 : 3;
        if (png.ColorType == PngColorType.Palette) bits = 8;
        var facts = new ImageFacts(info.Width, info.Height, bits, channels, "PNG");
        // Each row is a filter byte and its samples (PNG specification, ISO/IEC 15948 §7.2), all deflated; deflate gives at
        // most about 1032 bytes for one (zlib's technical notes).
        int samples = png.ColorType switch
        {
            PngColorType.GrayscaleWithAlpha => 2,
            PngColorType.Rgb => 3,
            PngColorType.RgbWithAlpha => 4,
            _ => 1,
        };
        int storedBits = png.BitDepth is { } depth ? (int)depth : 8;
        double rowBytes = 1 + Math.Ceiling((double)info.Width * samples * storedBits / 8);
        CheckSizeFitsFile(path, facts, rowBytes * info.Height, stream.Length, 1032, "deflate");
        return facts;
    }

    private static ImageFacts IdentifyJpeg(string path, Stream stream)
    {
        var info = Image.Identify(Configuration.Default, stream) ?? throw NotReadable(path, "JPEG");
        CheckJpegEnd(path, stream);
        var colour = info.Metadata.GetJpegMetadata().ColorType;
        if (colour == JpegColorType.Cmyk || colour is null && info.PixelType?.BitsPerPixel == 32)
            throw new InputProblemException(path, "is a CMYK JPEG (print colours), which is not read as a section image",
                "convert it to RGB or gray (PNG or TIFF)");
        int channels = colour == JpegColorType.Luminance || colour is null && info.PixelType?.BitsPerPixel == 8 ? 1 : 3;
        var facts = new ImageFacts(info.Width, info.Height, 8, channels, "JPEG");
        // A Huffman-coded scan spends at least one bit on every 8 × 8 block (ITU-T T.81 F.1.2): 512 pixels a byte. Arithmetic
        // coding can spend less, so the bound is eight times looser than that.
        CheckSizeFitsFile(path, facts, (double)info.Width * info.Height, stream.Length, 4096, "JPEG");
        return facts;
    }

    /// <summary>
    /// Refuses a JPEG without its end-of-image marker (FF D9) after its last scan (FF DA): a copy cut short. ImageSharp
    /// decodes such a file without complaint (the corpus test of a JPEG cut in half built with exit 0). Inside a scan FF is always followed by 00
    /// or a restart marker (ITU-T T.81 §B.1.1.5), so FF D9 there can only be the end; thumbnails sit before the main scan.
    /// Only the last MiB is searched, which allows for data appended after the image.
    /// </summary>
    private static void CheckJpegEnd(string path, Stream stream)
    {
        const int window = 1 << 20;
        long start = Math.Max(0, stream.Length - window);
        var tail = new byte[stream.Length - start];
        stream.Position = start;
        stream.ReadExactly(tail);
        stream.Position = 0;
        int lastScan = -1, end = -1;
        for (int i = 0; i + 1 < tail.Length; i++)
        {
            if (tail[i] != 0xFF) continue;
            if (tail[i + 1] == 0xDA) lastScan = i;
            else if (tail[i + 1] == 0xD9) end = i;
        }
        if (end < 0 || end < lastScan)
            throw new InputProblemException(path, "the file is truncated: the JPEG data stops before its end marker",
                "copy the file again from its source (the copy was cut short) or export it again");
    }

    private static InputProblemException NotReadable(string path, string format) =>
        new(path, $"has a {format} signature but its header cannot be read", "replace it with a readable image or move it out of the series folder");

    /// <summary>Decoded size from which a TIFF of lossless strips is read strip by strip (LibTiff) rather than whole (ImageSharp).</summary>
    public const long StripReadBytes = 16L << 20;

    private static void ReadTiff(string path, ImageFacts facts, GrayChannel channel, BoxDownsampler sink)
    {
        // ImageSharp cannot decode tiled TIFF (NOTES.md); it also refuses some striped layouts LibTiff reads. A large
        // image of lossless strips is read strip by strip: ImageSharp would hold the whole decoded image besides the gray one.
        if (facts.Format == TiffSectionFile.TiledFormat || facts.LosslessStrips && facts.PixelCount * facts.Channels * facts.BitsPerChannel / 8 >= StripReadBytes)
        {
            TiffSectionFile.Read(path, channel, sink);
            return;
        }
        try
        {
            ReadWithImageSharp(path, facts, channel, sink);
        }
        catch (Exception e) when (e is NotSupportedException or ImageFormatException && sink.RowsSeen == 0)
        {
            TiffSectionFile.Read(path, channel, sink);
        }
    }

    private static void ReadWithImageSharp(string path, ImageFacts facts, GrayChannel channel, BoxDownsampler sink)
    {
        switch (facts.Channels, facts.BitsPerChannel)
        {
            case (1, 8):
                Decode<L8>(path, facts, sink, (source, target) =>
                {
                    var unit = GrayLevels.Unit8;
                    for (int x = 0; x < source.Length; x++) target[x] = unit[source[x].PackedValue];
                });
                break;
            case (1, 16):
                Decode<L16>(path, facts, sink, (source, target) =>
                {
                    var unit = GrayLevels.Unit16;
                    for (int x = 0; x < source.Length; x++) target[x] = unit[source[x].PackedValue];
                });
                break;
            case (3, 8):
            {
                var (r, g, b) = GrayLevels.ChannelTables(channel, 8);
                Decode<Rgb24>(path, facts, sink, (source, target) =>
                {
                    for (int x = 0; x < source.Length; x++)
                    {
                        var p = source[x];
                        target[x] = r[p.R] + g[p.G] + b[p.B];
                    }
                });
                break;
            }
            case (3, 16):
            {
                var (r, g, b) = GrayLevels.ChannelTables(channel, 16);
                Decode<Rgb48>(path, facts, sink, (source, target) =>
                {
                    for (int x = 0; x < source.Length; x++)
                    {
                        var p = source[x];
                        target[x] = r[p.R] + g[p.G] + b[p.B];
                    }
                });
                break;
            }
            default:
                throw new InputProblemException(path, $"has {facts.Channels} channels of {facts.BitsPerChannel} bits, which is not read",
                    "convert it to 8- or 16-bit gray or RGB");
        }
    }

    private delegate void RowToGray<TPixel>(Span<TPixel> source, Span<float> target) where TPixel : unmanaged;

    private static void Decode<TPixel>(string path, ImageFacts facts, BoxDownsampler sink, RowToGray<TPixel> convert)
        where TPixel : unmanaged, IPixel<TPixel>
    {
        using var stream = OpenRead(path);
        // The pixel type is always explicit: the untyped Load gives Rgba32 and loses 16-bit precision (NOTES.md).
        using var image = Image.Load<TPixel>(Configuration.Default, stream);
        if (image.Width != facts.Width || image.Height != facts.Height)
            throw new InputProblemException(path, $"decodes to {image.Width} × {image.Height} pixels although its header says {facts.Width} × {facts.Height}",
                "export the image again");
        var row = new float[image.Width];
        image.ProcessPixelRows(accessor =>
        {
            for (int y = 0; y < accessor.Height; y++)
            {
                convert(accessor.GetRowSpan(y), row);
                sink.Accept(row);
            }
        });
    }
}
