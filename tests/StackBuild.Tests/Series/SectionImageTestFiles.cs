using System.Buffers.Binary;
using BitMiracle.LibTiff.Classic;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats;
using SixLabors.ImageSharp.Formats.Jpeg;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.Formats.Tiff;
using SixLabors.ImageSharp.PixelFormats;

namespace StackBuild.Tests;

/// <summary>A temporary folder that is deleted at the end of a test.</summary>
public sealed class SectionImageTempFolder : IDisposable
{
    public string Path { get; } = Directory.CreateTempSubdirectory("stackbuild-series-").FullName;

    public string File(string name) => System.IO.Path.Combine(Path, name);

    public void Dispose()
    {
        try { Directory.Delete(Path, recursive: true); } catch (IOException) { }
    }
}

/// <summary>Writes small synthetic section images in the formats the reader must handle.</summary>
public static class SectionImageTestFiles
{
    public static void Gray8Png(string path, int width, int height, Func<int, int, byte> value) =>
        Save(path, width, height, (x, y) => new L8(value(x, y)), new PngEncoder { BitDepth = PngBitDepth.Bit8, ColorType = PngColorType.Grayscale });

    public static void Gray16Png(string path, int width, int height, Func<int, int, ushort> value) =>
        Save(path, width, height, (x, y) => new L16(value(x, y)), new PngEncoder { BitDepth = PngBitDepth.Bit16, ColorType = PngColorType.Grayscale });

    public static void Rgb8Png(string path, int width, int height, Func<int, int, Rgb24> value) =>
        Save(path, width, height, value, new PngEncoder { BitDepth = PngBitDepth.Bit8, ColorType = PngColorType.Rgb });

    public static void Rgba8Png(string path, int width, int height, Func<int, int, Rgba32> value) =>
        Save(path, width, height, value, new PngEncoder { BitDepth = PngBitDepth.Bit8, ColorType = PngColorType.RgbWithAlpha });

    public static void Rgb16Png(string path, int width, int height, Func<int, int, Rgb48> value) =>
        Save(path, width, height, value, new PngEncoder { BitDepth = PngBitDepth.Bit16, ColorType = PngColorType.Rgb });

    public static void GrayJpeg(string path, int width, int height, Func<int, int, byte> value) =>
        Save(path, width, height, (x, y) => new L8(value(x, y)), new JpegEncoder { ColorType = JpegColorType.Luminance, Quality = 95 });

    public static void RgbJpeg(string path, int width, int height, Func<int, int, Rgb24> value) =>
        Save(path, width, height, value, new JpegEncoder { Quality = 95 });

    /// <summary>8-bit gray striped TIFF written by ImageSharp (it cannot write 16-bit gray TIFF, NOTES.md).</summary>
    public static void Gray8Tiff(string path, int width, int height, Func<int, int, byte> value) =>
        Save(path, width, height, (x, y) => new L8(value(x, y)), new TiffEncoder { BitsPerPixel = TiffBitsPerPixel.Bit8 });

    private static void Save<TPixel>(string path, int width, int height, Func<int, int, TPixel> value, IImageEncoder encoder)
        where TPixel : unmanaged, IPixel<TPixel>
    {
        using var image = new Image<TPixel>(width, height);
        for (int y = 0; y < height; y++)
            for (int x = 0; x < width; x++)
                image[x, y] = value(x, y);
        image.Save(path, encoder);
    }

    /// <summary>
    /// A TIFF written with LibTiff: tiled when <paramref name="tile"/> is given, else striped; samples given per
    /// pixel by <paramref name="value"/>(x, y, sample). Big-endian when asked.
    /// </summary>
    public static void LibTiff(string path, int width, int height, int bits, int samples, Func<int, int, int, int> value,
        int? tile = 16, Photometric? photometric = null, bool planar = false, Compression compression = Compression.DEFLATE,
        bool bigEndian = false, SampleFormat format = SampleFormat.UINT, (ushort[] Red, ushort[] Green, ushort[] Blue)? colourMap = null)
    {
        using var tiff = Tiff.Open(path, bigEndian ? "wb" : "wl") ?? throw new InvalidOperationException("LibTiff cannot create " + path);
        tiff.SetField(TiffTag.IMAGEWIDTH, width);
        tiff.SetField(TiffTag.IMAGELENGTH, height);
        tiff.SetField(TiffTag.BITSPERSAMPLE, bits);
        tiff.SetField(TiffTag.SAMPLESPERPIXEL, samples);
        tiff.SetField(TiffTag.SAMPLEFORMAT, format);
        tiff.SetField(TiffTag.PHOTOMETRIC, photometric ?? (samples >= 3 ? Photometric.RGB : Photometric.MINISBLACK));
        tiff.SetField(TiffTag.PLANARCONFIG, planar ? PlanarConfig.SEPARATE : PlanarConfig.CONTIG);
        tiff.SetField(TiffTag.COMPRESSION, compression);
        if (colourMap is var (mapRed, mapGreen, mapBlue)) tiff.SetField(TiffTag.COLORMAP, mapRed, mapGreen, mapBlue);
        if (samples == 4 && photometric == Photometric.SEPARATED) tiff.SetField(TiffTag.INKSET, InkSet.CMYK);
        if (compression == Compression.JPEG)
        {
            tiff.SetField(TiffTag.JPEGQUALITY, 95);
            // The codec takes RGB and stores YCbCr; without this the buffer would have to be subsampled YCbCr.
            if (photometric == Photometric.YCBCR) tiff.SetField(TiffTag.JPEGCOLORMODE, JpegColorMode.RGB);
        }
        int bytes = bits / 8;
        int perPixel = planar ? 1 : samples;
        if (tile is int t)
        {
            tiff.SetField(TiffTag.TILEWIDTH, t);
            tiff.SetField(TiffTag.TILELENGTH, t);
            var buffer = new byte[tiff.TileSize()];
            for (int plane = 0; plane < (planar ? samples : 1); plane++)
                for (int y0 = 0; y0 < height; y0 += t)
                    for (int x0 = 0; x0 < width; x0 += t)
                    {
                        Array.Clear(buffer);
                        for (int r = 0; r < t; r++)
                            for (int c = 0; c < t; c++)
                                for (int s = 0; s < perPixel; s++)
                                {
                                    int x = Math.Min(x0 + c, width - 1), y = Math.Min(y0 + r, height - 1);
                                    Put(buffer, ((r * t + c) * perPixel + s) * bytes, bits, value(x, y, planar ? plane : s));
                                }
                        if (tiff.WriteTile(buffer, x0, y0, 0, (short)plane) < 0) throw new InvalidOperationException("WriteTile failed");
                    }
        }
        else
        {
            tiff.SetField(TiffTag.ROWSPERSTRIP, 5);
            var row = new byte[width * perPixel * bytes];
            for (int plane = 0; plane < (planar ? samples : 1); plane++)
                for (int y = 0; y < height; y++)
                {
                    for (int x = 0; x < width; x++)
                        for (int s = 0; s < perPixel; s++)
                            Put(row, (x * perPixel + s) * bytes, bits, value(x, y, planar ? plane : s));
                    if (!tiff.WriteScanline(row, 0, y, (short)plane)) throw new InvalidOperationException("WriteScanline failed");
                }
        }
        tiff.WriteDirectory();
    }

    /// <summary>LibTiff takes samples in the machine's byte order and swaps them itself for a big-endian file.</summary>
    private static void Put(byte[] buffer, int offset, int bits, int value)
    {
        if (bits == 8) buffer[offset] = (byte)value;
        else if (bits == 16) BitConverter.TryWriteBytes(buffer.AsSpan(offset, 2), (ushort)value);
        else BitConverter.TryWriteBytes(buffer.AsSpan(offset, 4), (float)value);
    }

    /// <summary>Rewrites the Compression tag (259) of a little-endian TIFF's first directory, leaving the data as they are.</summary>
    public static void PatchTiffCompression(string path, ushort scheme)
    {
        var bytes = File.ReadAllBytes(path);
        if (bytes[0] != (byte)'I') throw new InvalidOperationException("expects a little-endian TIFF");
        int ifd = (int)BinaryPrimitives.ReadUInt32LittleEndian(bytes.AsSpan(4));
        int count = BinaryPrimitives.ReadUInt16LittleEndian(bytes.AsSpan(ifd));
        for (int i = 0; i < count; i++)
        {
            int entry = ifd + 2 + 12 * i;
            if (BinaryPrimitives.ReadUInt16LittleEndian(bytes.AsSpan(entry)) == 259)
            {
                BinaryPrimitives.WriteUInt16LittleEndian(bytes.AsSpan(entry + 8), scheme);
                File.WriteAllBytes(path, bytes);
                return;
            }
        }
        throw new InvalidOperationException("no Compression tag");
    }

    /// <summary>Rewrites the width and height in a PNG's IHDR chunk (and its CRC), leaving the pixel data as they are.</summary>
    public static void PatchPngSize(string path, uint width, uint height)
    {
        var bytes = File.ReadAllBytes(path);
        // PNG layout (PNG specification, ISO/IEC 15948): 8-byte signature, then IHDR: length, "IHDR", width, height, ...
        BinaryPrimitives.WriteUInt32BigEndian(bytes.AsSpan(16), width);
        BinaryPrimitives.WriteUInt32BigEndian(bytes.AsSpan(20), height);
        BinaryPrimitives.WriteUInt32BigEndian(bytes.AsSpan(29), Crc32(bytes.AsSpan(12, 17)));
        File.WriteAllBytes(path, bytes);
    }

    /// <summary>The CRC-32 of the PNG specification (polynomial 0xEDB88320, reflected).</summary>
    private static uint Crc32(ReadOnlySpan<byte> data)
    {
        uint crc = 0xFFFFFFFF;
        foreach (byte b in data)
        {
            crc ^= b;
            for (int k = 0; k < 8; k++) crc = (crc & 1) != 0 ? 0xEDB88320 ^ (crc >> 1) : crc >> 1;
        }
        return ~crc;
    }
}
