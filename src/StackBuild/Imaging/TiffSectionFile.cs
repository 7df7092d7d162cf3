using System.Buffers.Binary;
using System.Runtime.InteropServices;
using BitMiracle.LibTiff.Classic;
using StackBuild.IO;

namespace StackBuild.Imaging;

/// <summary>
/// TIFF through BitMiracle.LibTiff.NET: reads the tags of the first image in the file (slide scanners put the
/// full resolution first) and decodes tiled or striped, interleaved or planar, 8- or 16-bit gray, RGB,
/// palette and JPEG-compressed YCbCr TIFF into gray rows. ImageSharp 2.1 cannot decode tiled TIFF (NOTES.md).
/// </summary>
internal static class TiffSectionFile
{
    public const string TiledFormat = "TIFF (tiled)";

    static TiffSectionFile() => Tiff.SetErrorHandler(new QuietErrors());

    private enum Colour { Gray, GrayInverted, Rgb, Palette }

    private sealed record Layout(int Width, int Height, int Bits, int SamplesPerPixel, bool Planar, Colour Colour, bool Tiled,
        bool JpegYCbCr);

    public static ImageFacts Identify(string path, Stream stream)
    {
        using var tiff = Open(path, stream);
        var layout = ReadLayout(path, tiff);
        CheckDataInsideFile(path, tiff, layout.Tiled, stream.Length);
        int channels = layout.Colour is Colour.Gray or Colour.GrayInverted ? 1 : 3;
        var compression = (Compression)tiff.GetFieldDefaulted(TiffTag.COMPRESSION)[0].ToInt();
        // Lossless strips of gray or RGB samples: LibTiff gives the same stored values as ImageSharp and the same look-up
        // tables turn them into gray, so reading them strip by strip changes no value (palette, inverted gray and JPEG are
        // converted differently by the two and stay with ImageSharp).
        bool strips = !layout.Tiled && layout.Colour is Colour.Gray or Colour.Rgb && !layout.JpegYCbCr
            && compression is Compression.NONE or Compression.LZW or Compression.DEFLATE or Compression.ADOBE_DEFLATE or Compression.PACKBITS;
        var facts = new ImageFacts(layout.Width, layout.Height, layout.Bits, channels, layout.Tiled ? TiledFormat : "TIFF", strips);
        if (MaxExpansion(compression) is { } expansion)
            SectionImageReader.CheckSizeFitsFile(path, facts, (double)layout.Width * layout.Height * layout.SamplesPerPixel * (layout.Bits / 8),
                stream.Length, expansion, compression.ToString());
        return facts;
    }

    /// <summary>Most image directories looked at for <see cref="PageDirectories"/>.</summary>
    public const int MostPages = 4096;

    /// <summary>
    /// The directories that hold the file's pages: those of the first image's size, in file order (each checked as the
    /// first is before LibTiff reads it). Directories of another size are reduced copies (a scanner's pyramid levels,
    /// thumbnails, TIFF 6.0's NewSubfileType "reduced-resolution") and are not pages.
    /// </summary>
    public static int[] PageDirectories(string path)
    {
        using var stream = SectionImageReader.OpenRead(path);
        var sizes = CheckDirectories(path, stream, MostPages);
        return [.. Enumerable.Range(0, sizes.Count).Where(d => sizes[d] == sizes[0])];
    }

    /// <summary>Decodes page <paramref name="page"/> (0 = the first image; see <see cref="PageDirectories"/>) into gray rows.</summary>
    public static void Read(string path, GrayChannel channel, BoxDownsampler sink, int page = 0)
    {
        int directory = 0;
        if (page > 0)
        {
            var pages = PageDirectories(path);
            if (page >= pages.Length)
                throw new InputProblemException(path, $"has {pages.Length} page{(pages.Length == 1 ? "" : "s")} of its first image's size, not {page + 1}",
                    "give an image set whose files all hold the same pages");
            directory = pages[page];
        }
        using var stream = SectionImageReader.OpenRead(path);
        using var tiff = Open(path, stream);
        if (directory > 0 && !tiff.SetDirectory((short)directory)) throw Failed(path, $"page {page + 1} cannot be read");
        var layout = ReadLayout(path, tiff);
        if (layout.Width != sink.Width || layout.Height != sink.Height)
            throw new InputProblemException(path, $"page {page + 1} is {layout.Width} × {layout.Height} pixels, the first {sink.Width} × {sink.Height}",
                "export the pages at one size");
        if (layout.JpegYCbCr) tiff.SetField(TiffTag.JPEGCOLORMODE, JpegColorMode.RGB); // the codec returns RGB
        var tables = SampleTables(tiff, layout, channel);
        int blockWidth, blockHeight;
        if (layout.Tiled)
        {
            blockWidth = tiff.GetField(TiffTag.TILEWIDTH)[0].ToInt();
            blockHeight = tiff.GetField(TiffTag.TILELENGTH)[0].ToInt();
        }
        else
        {
            blockWidth = layout.Width;
            blockHeight = (int)Math.Min(layout.Height, tiff.GetFieldDefaulted(TiffTag.ROWSPERSTRIP)[0].ToUInt());
        }
        int bytesPerSample = layout.Bits / 8;
        int samplesInBuffer = layout.Planar ? 1 : layout.SamplesPerPixel;
        // The tile or strip sizes come from the file's tags: a damaged tag must not size the buffers. A block holds at most
        // the whole image's samples, or 64 MB (tiles may overhang a small image).
        long blockBytes = (long)blockWidth * samplesInBuffer * bytesPerSample * blockHeight;
        long libTiffBlock = layout.Tiled ? tiff.TileSize() : tiff.StripSize();
        long most = Math.Max((long)layout.Width * layout.Height * layout.SamplesPerPixel * bytesPerSample, 64L << 20);
        if (blockWidth <= 0 || blockHeight <= 0 || libTiffBlock <= 0 || blockBytes > most || libTiffBlock > most
            || (long)blockHeight * layout.Width > Math.Max((long)layout.Width * layout.Height, 16L << 20))
            throw new InputProblemException(path,
                $"its {(layout.Tiled ? "tiles" : "strips")} of {blockWidth} × {blockHeight} pixels do not fit the image of {layout.Width} × {layout.Height} pixels it holds",
                "its header is damaged; copy the file again from its source or export it again");
        int rowBytes = blockWidth * samplesInBuffer * bytesPerSample;
        var buffer = new byte[Math.Max(libTiffBlock, blockBytes)];
        var band = new float[blockHeight * layout.Width];
        // Interleaved samples come in one decode per block; planar ones in one decode per plane that is needed.
        int[] planes = layout.Planar ? [.. Enumerable.Range(0, tables.Length).Where(s => tables[s] is not null)] : [0];
        for (int y0 = 0; y0 < layout.Height; y0 += blockHeight)
        {
            int rows = Math.Min(blockHeight, layout.Height - y0);
            band.AsSpan(0, rows * layout.Width).Clear();
            foreach (int plane in planes)
            {
                for (int x0 = 0; x0 < layout.Width; x0 += blockWidth)
                {
                    int read = layout.Tiled
                        ? tiff.ReadTile(buffer, 0, x0, y0, 0, (short)plane)
                        : tiff.ReadEncodedStrip(tiff.ComputeStrip(y0, (short)plane), buffer, 0, -1);
                    if (read < 0) throw Failed(path, "a tile or strip cannot be decoded");
                    int columns = Math.Min(blockWidth, layout.Width - x0);
                    for (int r = 0; r < rows; r++)
                    {
                        var source = buffer.AsSpan(r * rowBytes, rowBytes);
                        var target = band.AsSpan(r * layout.Width + x0, columns);
                        if (layout.Planar) AddSamples(source, target, 1, 0, tables[plane]!, bytesPerSample);
                        else
                            for (int s = 0; s < tables.Length; s++)
                                if (tables[s] is { } table) AddSamples(source, target, samplesInBuffer, s, table, bytesPerSample);
                    }
                }
            }
            for (int r = 0; r < rows; r++) sink.Accept(band.AsSpan(r * layout.Width, layout.Width));
        }
    }

    /// <summary>target[i] += table[sample value of pixel i], for the given sample within each pixel.</summary>
    private static void AddSamples(ReadOnlySpan<byte> source, Span<float> target, int stride, int sample, float[] table, int bytesPerSample)
    {
        if (bytesPerSample == 1)
        {
            for (int i = 0, k = sample; i < target.Length; i++, k += stride) target[i] += table[source[k]];
        }
        else
        {
            // LibTiff swaps 16-bit samples to the machine's byte order while decoding.
            var wide = MemoryMarshal.Cast<byte, ushort>(source);
            for (int i = 0, k = sample; i < target.Length; i++, k += stride) target[i] += table[wide[k]];
        }
    }

    /// <summary>One table per sample index (null: sample not used) mapping stored values to their share of the gray value.</summary>
    private static float[]?[] SampleTables(Tiff tiff, Layout layout, GrayChannel channel)
    {
        int max = (1 << layout.Bits) - 1;
        switch (layout.Colour)
        {
            case Colour.Gray:
                return [layout.Bits == 8 ? GrayLevels.Unit8 : GrayLevels.Unit16];
            case Colour.GrayInverted:
            {
                var table = new float[max + 1];
                for (int v = 0; v <= max; v++) table[v] = (float)(1.0 - (double)v / max);
                return [table];
            }
            case Colour.Palette:
            {
                var map = tiff.GetField(TiffTag.COLORMAP);
                ushort[] red = map[0].ToUShortArray(), green = map[1].ToUShortArray(), blue = map[2].ToUShortArray();
                var (wr, wg, wb) = GrayLevels.Weights(channel);
                var table = new float[max + 1];
                for (int v = 0; v <= max && v < red.Length; v++)
                    table[v] = (float)((wr * red[v] + wg * green[v] + wb * blue[v]) / 65535.0);
                return [table];
            }
            default:
            {
                var (r, g, b) = GrayLevels.ChannelTables(channel, layout.Bits);
                var (wr, wg, wb) = GrayLevels.Weights(channel);
                return [wr == 0 ? null : r, wg == 0 ? null : g, wb == 0 ? null : b];
            }
        }
    }

    private static Tiff Open(string path, Stream stream)
    {
        CheckFirstDirectory(path, stream);
        QuietErrors.Last = null;
        var tiff = Tiff.ClientOpen(path, "r", stream, new TiffStream());
        return tiff ?? throw Failed(path, "the TIFF structure cannot be read");
    }

    /// <summary>
    /// Refuses a first image directory whose entries, or the values a tag declares, run past the end of the file, before
    /// LibTiff reads it: LibTiff takes memory for as many values as a tag declares (a damaged count took 950 MB for a
    /// 664-byte file) before it finds them missing. Layout from the TIFF 6.0 specification §2 and BigTIFF.
    /// </summary>
    private static void CheckFirstDirectory(string path, Stream stream) => CheckDirectories(path, stream, 1);

    /// <summary>
    /// Checks the chain of image directories from the header as <see cref="CheckFirstDirectory"/> checks the first, at most
    /// <paramref name="most"/> of them (a chain that loops back is cut where it loops), and returns each one's declared
    /// width and height in file order (TIFF 6.0 §2: each directory ends with the offset of the next, 0 after the last).
    /// </summary>
    private static List<(ulong Width, ulong Height)> CheckDirectories(string path, Stream stream, int most)
    {
        long length = stream.Length;
        var head = new byte[16];
        stream.Position = 0;
        int got = stream.ReadAtLeast(head, head.Length, throwOnEndOfStream: false);
        stream.Position = 0;
        if (got < 8) throw Damaged(path, $"the file ends after {got} bytes, inside the TIFF header");
        bool little = head[0] == (byte)'I';
        ulong U(ReadOnlySpan<byte> b, int size) => size switch
        {
            2 => little ? BinaryPrimitives.ReadUInt16LittleEndian(b) : BinaryPrimitives.ReadUInt16BigEndian(b),
            4 => little ? BinaryPrimitives.ReadUInt32LittleEndian(b) : BinaryPrimitives.ReadUInt32BigEndian(b),
            _ => little ? BinaryPrimitives.ReadUInt64LittleEndian(b) : BinaryPrimitives.ReadUInt64BigEndian(b),
        };
        bool big = U(head.AsSpan(2), 2) == 43;
        if (big && got < 16) throw Damaged(path, $"the file ends after {got} bytes, inside the BigTIFF header");
        ulong directory = big ? U(head.AsSpan(8), 8) : U(head.AsSpan(4), 4);
        int countSize = big ? 8 : 2, entrySize = big ? 20 : 12, inline = big ? 8 : 4;
        var sizes = new List<(ulong Width, ulong Height)>();
        var seen = new HashSet<ulong>();
        for (int n = 0; n < most && (n == 0 || directory != 0) && seen.Add(directory); n++)
        {
            string which = n == 0 ? "first image directory" : $"image directory {n + 1}";
            if (directory > (ulong)length - (ulong)countSize)
                throw Damaged(path, $"its {which} starts at byte {directory:N0}, past the end of the {length:N0}-byte file");
            var countBytes = new byte[countSize];
            stream.Position = (long)directory;
            stream.ReadExactly(countBytes);
            ulong entries = U(countBytes, countSize);
            if (entries > ((ulong)length - directory - (ulong)countSize) / (ulong)entrySize)
                throw Damaged(path, $"its {which} declares {entries:N0} entries, more than the {length:N0}-byte file holds");
            var table = new byte[(int)entries * entrySize];
            stream.ReadExactly(table);
            var next = new byte[inline];
            ulong nextDirectory = stream.ReadAtLeast(next, inline, throwOnEndOfStream: false) == inline ? U(next, inline) : 0;
            stream.Position = 0;
            var (single, counts) = CheckEntries(path, table, (int)entries, entrySize, inline, big, length, U);
            CheckBlockCount(path, single, counts);
            sizes.Add((single.GetValueOrDefault(256), single.GetValueOrDefault(257)));
            directory = nextDirectory;
        }
        return sizes;
    }

    private delegate ulong Unsigned(ReadOnlySpan<byte> bytes, int size);

    /// <summary>Refuses an entry of one directory whose values run past the end of the file; returns the one-value tags and every tag's count.</summary>
    private static (Dictionary<int, ulong> Single, Dictionary<int, ulong> Counts) CheckEntries(string path, byte[] table, int entries,
        int entrySize, int inline, bool big, long length, Unsigned U)
    {
        var single = new Dictionary<int, ulong>(); // tags with one SHORT, LONG or LONG8 value, as stored in the entry
        var counts = new Dictionary<int, ulong>();
        for (int e = 0; e < entries; e++)
        {
            var entry = table.AsSpan(e * entrySize, entrySize);
            int tag = (int)U(entry, 2);
            int type = (int)U(entry[2..], 2);
            ulong valueCount = big ? U(entry[4..], 8) : U(entry[4..], 4);
            counts[tag] = valueCount;
            if (valueCount == 1 && type is 3 or 4 or 16)
                single[tag] = U(entry[(big ? 12 : 8)..], type == 3 ? 2 : type == 4 ? 4 : 8);
            int typeSize = (int)U(entry[2..], 2) switch
            {
                1 or 2 or 6 or 7 => 1,
                3 or 8 => 2,
                4 or 9 or 11 or 13 => 4,
                5 or 10 or 12 or 16 or 17 or 18 => 8,
                _ => 0, // a type LibTiff does not know: it skips the entry
            };
            ulong count = big ? U(entry[4..], 8) : U(entry[4..], 4);
            if (typeSize == 0 || count <= (ulong)(inline / typeSize)) continue;
            ulong offset = big ? U(entry[12..], 8) : U(entry[8..], 4);
            if (count > (ulong)length / (ulong)typeSize || offset > (ulong)length - count * (ulong)typeSize)
                throw Damaged(path, $"its tag {tag} declares {count:N0} values from byte {offset:N0}, past the end of the {length:N0}-byte file");
        }
        return (single, counts);
    }

    /// <summary>
    /// LibTiff takes memory for as many strip or tile offsets as the image's size implies (a height of 2·10⁹ rows took
    /// 8 GB, found by fuzzing), whatever the offsets tag lists: refuse a size that needs more strips or tiles than the
    /// file lists (the list itself was checked against the file's length).
    /// </summary>
    private static void CheckBlockCount(string path, Dictionary<int, ulong> single, Dictionary<int, ulong> counts)
    {
        const int ImageWidth = 256, ImageLength = 257, SamplesPerPixel = 277, RowsPerStrip = 278, PlanarConfiguration = 284,
            TileWidth = 322, TileLength = 323, StripOffsets = 273, TileOffsets = 324;
        if (!single.TryGetValue(ImageWidth, out var width) || !single.TryGetValue(ImageLength, out var height) || width == 0 || height == 0)
            return; // LibTiff refuses these itself
        if (width > int.MaxValue || height > int.MaxValue)
            throw Damaged(path, $"it declares {width} × {height} pixels");
        ulong planes = single.GetValueOrDefault(PlanarConfiguration, 1UL) == 2 ? Math.Max(1UL, single.GetValueOrDefault(SamplesPerPixel, 1UL)) : 1;
        double needed; // in floating point: the products of damaged sizes may not fit 64 bits
        int listTag;
        string what;
        if (single.TryGetValue(TileWidth, out var tileWidth) && single.TryGetValue(TileLength, out var tileLength) && tileWidth > 0 && tileLength > 0)
        {
            needed = Math.Ceiling((double)width / tileWidth) * Math.Ceiling((double)height / tileLength) * planes;
            (listTag, what) = (TileOffsets, "tiles");
        }
        else
        {
            ulong rows = Math.Clamp(single.GetValueOrDefault(RowsPerStrip, height), 1, height);
            needed = Math.Ceiling((double)height / rows) * planes;
            (listTag, what) = (StripOffsets, "strips");
        }
        if (counts.TryGetValue(listTag, out var listed) && needed > listed)
            throw Damaged(path, $"its size of {width} × {height} pixels needs {needed:N0} {what}, but it lists {listed:N0}");
    }

    private static InputProblemException Damaged(string path, string what) =>
        new(path, $"the TIFF structure cannot be read ({what})", "check that the file is complete (copy it again) or export it again");

    private static Layout ReadLayout(string path, Tiff tiff)
    {
        int width = tiff.GetField(TiffTag.IMAGEWIDTH)?[0].ToInt() ?? 0;
        int height = tiff.GetField(TiffTag.IMAGELENGTH)?[0].ToInt() ?? 0;
        if (width <= 0 || height <= 0)
            throw new InputProblemException(path, "is a TIFF without a valid image size", "export the image again");
        int bits = tiff.GetFieldDefaulted(TiffTag.BITSPERSAMPLE)[0].ToInt();
        int samples = tiff.GetFieldDefaulted(TiffTag.SAMPLESPERPIXEL)[0].ToInt();
        var format = (SampleFormat)tiff.GetFieldDefaulted(TiffTag.SAMPLEFORMAT)[0].ToInt();
        bool planar = (PlanarConfig)tiff.GetFieldDefaulted(TiffTag.PLANARCONFIG)[0].ToInt() == PlanarConfig.SEPARATE;
        var compression = (Compression)tiff.GetFieldDefaulted(TiffTag.COMPRESSION)[0].ToInt();
        var photometric = tiff.GetField(TiffTag.PHOTOMETRIC) is { } p ? (Photometric)p[0].ToInt() : Photometric.MINISBLACK;
        bool tiled = tiff.IsTiled();

        const string convert = "convert it to 8- or 16-bit gray or RGB (PNG or TIFF)";
        if (format is not SampleFormat.UINT and not SampleFormat.VOID)
            throw new InputProblemException(path, $"is a TIFF with {(format == SampleFormat.IEEEFP ? "floating-point" : "signed")} samples, which is not read", convert);
        if (bits is not 8 and not 16)
            throw new InputProblemException(path, $"is a TIFF with {bits} bits per sample, which is not read", convert);
        if (samples is < 1 or > 16)
            throw new InputProblemException(path, $"is a TIFF with {samples} samples per pixel, which is not read", convert);
        bool jpegYCbCr = false;
        Colour colour;
        switch (photometric)
        {
            case Photometric.MINISBLACK: colour = Colour.Gray; break;
            case Photometric.MINISWHITE: colour = Colour.GrayInverted; break;
            case Photometric.RGB when samples >= 3: colour = Colour.Rgb; break;
            case Photometric.PALETTE when bits == 8 && tiff.GetField(TiffTag.COLORMAP) is not null: colour = Colour.Palette; break;
            case Photometric.YCBCR when compression == Compression.JPEG && bits == 8 && samples == 3 && !planar:
                colour = Colour.Rgb;
                jpegYCbCr = true;
                break;
            case Photometric.SEPARATED:
                throw new InputProblemException(path, "is a CMYK TIFF (print colours), which is not read", "convert it to RGB or gray");
            default:
                throw new InputProblemException(path, $"is a TIFF with colour model {photometric} and {samples} samples per pixel, which is not read", convert);
        }
        if (!tiff.IsCodecConfigured(compression))
            throw new InputProblemException(path, $"is a TIFF compressed with scheme {(int)compression}{(Enum.IsDefined(compression) ? $" ({compression})" : "")}, which cannot be decoded here",
                "save it again uncompressed or with LZW, Deflate or JPEG compression");
        return new Layout(width, height, bits, samples, planar, colour, tiled, jpegYCbCr);
    }

    /// <summary>
    /// Most decoded bytes one stored byte gives under a compression scheme: none 1; PackBits 64 (a two-byte run of 128);
    /// Deflate about 1032 (zlib's technical notes); LZW 4096 (a code of at least 9 bits emits at most one 4096-entry
    /// table string; rounded up); JPEG as for JPEG files, one byte per 4096 pixels of up to 4 samples. Null for schemes
    /// this does not bound.
    /// </summary>
    private static double? MaxExpansion(Compression compression) => compression switch
    {
        Compression.NONE => 1,
        Compression.PACKBITS => 64,
        Compression.DEFLATE or Compression.ADOBE_DEFLATE => 1032,
        Compression.LZW => 4096,
        Compression.JPEG or Compression.OJPEG => 4 * 4096,
        _ => null,
    };

    /// <summary>
    /// Refuses a file whose strips or tiles, as its tags place them, run past its end: a copy cut short. (A TIFF cut
    /// inside its strip was built without complaint before this check.)
    /// </summary>
    private static void CheckDataInsideFile(string path, Tiff tiff, bool tiled, long fileLength)
    {
        var offsets = tiff.GetField(tiled ? TiffTag.TILEOFFSETS : TiffTag.STRIPOFFSETS);
        var counts = tiff.GetField(tiled ? TiffTag.TILEBYTECOUNTS : TiffTag.STRIPBYTECOUNTS);
        if (offsets is null || counts is null) return; // LibTiff reports these when decoding
        var start = Longs(offsets[0]);
        var size = Longs(counts[0]);
        long end = 0;
        for (int i = 0; i < Math.Min(start.Length, size.Length); i++) end = Math.Max(end, start[i] + size[i]);
        if (end > fileLength)
            throw new InputProblemException(path,
                $"the file is truncated: it is {fileLength:N0} bytes but its image data runs to byte {end:N0}",
                "copy the file again from its source (the copy was cut short) or export it again");
    }

    private static long[] Longs(FieldValue value) =>
        value.Value switch
        {
            long[] l => l,
            ulong[] u => [.. u.Select(v => (long)Math.Min(v, long.MaxValue))],
            uint[] u => [.. u.Select(v => (long)v)],
            int[] i => [.. i.Select(v => (long)(uint)v)],
            ushort[] u => [.. u.Select(v => (long)v)],
            _ => value.ToUIntArray()?.Select(v => (long)v).ToArray() ?? [],
        };

    private static InputProblemException Failed(string path, string what)
    {
        var last = QuietErrors.Last ?? "";
        if (last.StartsWith(path + ": ", StringComparison.Ordinal)) last = last[(path.Length + 2)..]; // LibTiff names the file itself
        var detail = last.Length > 0 ? $" ({last})" : "";
        return new InputProblemException(path, $"{what}{detail}", "check that the file is complete (copy it again) or export it again");
    }

    /// <summary>LibTiff reports problems through a process-wide handler that writes to the console by default; keep the last message instead.</summary>
    private sealed class QuietErrors : TiffErrorHandler
    {
        [ThreadStatic] internal static string? Last;

        public override void ErrorHandler(Tiff tif, string method, string format, params object[] args) => Last = Text(format, args);
        public override void ErrorHandlerExt(Tiff tif, object clientData, string method, string format, params object[] args) { }
        public override void WarningHandler(Tiff tif, string method, string format, params object[] args) { }
        public override void WarningHandlerExt(Tiff tif, object clientData, string method, string format, params object[] args) { }

        private static string Text(string format, object[] args)
        {
            try { return string.Format(System.Globalization.CultureInfo.InvariantCulture, format, args).TrimEnd('.'); }
            catch (FormatException) { return format; }
        }
    }
}
