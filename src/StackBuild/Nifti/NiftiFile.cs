using System.Runtime.CompilerServices;
using System.Buffers;
using System.Buffers.Binary;
using System.IO.Compression;
using System.Numerics;
using System.Runtime.InteropServices;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Nifti;

/// <summary>
/// Reads and writes single-file NIfTI-1 images (.nii, and .nii.gz through gzip), as specified by nifti1.h.
/// Every problem with a file being read is an <see cref="InputProblemException"/>.
/// </summary>
public static class NiftiFile
{
    /// <summary>Most voxels StackBuild reads from one file (2³¹), checked before anything is allocated.</summary>
    public const long MaximumVoxels = 1L << 31;

    /// <summary>
    /// Deflate cannot shrink data by more than about 1032:1 (zlib's documentation, from memory), so a .gz
    /// file of n bytes cannot hold more than about 1032·n bytes: a header claiming more is refused before allocating.
    /// </summary>
    private const long MaximumDeflateRatio = 1032;

    private const int ChunkElements = 1 << 16;

    /// <summary>Reads the header, image and voxels of a .nii or .nii.gz file (gzip is recognised by its content, whatever the name).</summary>
    public static NiftiImage Read(string path)
    {
        return Guarded(path, () =>
        {
            using var opened = Open(path);
            var header = ReadHeaderFrom(opened, path);
            long bytes = DataBytes(header, path);
            long offset = header.DataOffset;
            if (!opened.Compressed && opened.Length < offset + bytes)
                throw new InputProblemException(path,
                    $"the file is too short: it is {opened.Length:N0} bytes but its header needs {offset + bytes:N0} ({Describe(header)} from byte {offset})",
                    "the file is truncated or its header is damaged; copy or write it again");
            if (opened.Compressed && offset + bytes > opened.Length * MaximumDeflateRatio + 1024)
                throw new InputProblemException(path,
                    $"the header claims {bytes:N0} bytes of voxels ({Describe(header)}), more than a {opened.Length:N0}-byte gzip file can hold",
                    "the header is damaged; write the file again");

            Skip(opened.Stream, offset - NiftiHeader.HeaderSize);
            var data = ReadVoxels(opened.Stream, header);
            // Reach the gzip trailer so that GZipStream verifies its CRC-32. (A file cut inside the trailer, with all
            // voxels present, is still read: GZipStream does not report a missing trailer.)
            if (opened.Compressed) opened.Stream.CopyTo(Stream.Null);
            return new NiftiImage(header, data);
        });
    }

    /// <summary>Reads and checks only the 348-byte header (the voxel data is not checked).</summary>
    public static NiftiHeader ReadHeader(string path)
    {
        return Guarded(path, () =>
        {
            using var opened = Open(path);
            var header = ReadHeaderFrom(opened, path);
            DataBytes(header, path);
            return header;
        });
    }

    /// <summary>
    /// Writes <paramref name="volume"/> as NIfTI-1 (.nii.gz when the path ends in ".gz"), through a temporary
    /// file renamed into place. The qform and sform both describe the volume's affine (see <see cref="NiftiWriteOptions"/>
    /// for types, units and the scaling rule for integer types).
    /// </summary>
    public static void Write(string path, Volume volume, NiftiWriteOptions? options = null)
    {
        var (header, voxels) = Prepare(volume, options);
        WriteFile(path, header, voxels);
    }

    /// <summary>
    /// Writes <paramref name="volume"/> as NIfTI-1 into <paramref name="file"/> (gzip-compressed when
    /// <paramref name="compress"/>), for a caller that puts the file in place itself (see <see cref="OutputSet"/>).
    /// </summary>
    public static void Write(Stream file, bool compress, Volume volume, NiftiWriteOptions? options = null)
    {
        var (header, voxels) = Prepare(volume, options);
        WriteStream(file, compress, header, voxels);
    }

    /// <summary>
    /// Writes a NIfTI-1 volume whose voxels are already in their stored type (uint8, uint16 or rgb24, little-endian, i
    /// fastest), scl_slope 1 and scl_inter 0, into <paramref name="file"/>: the header as <see cref="Write(Stream, bool, Volume, NiftiWriteOptions?)"/>
    /// writes it for whole numbers within the type's range, then <paramref name="writeVoxels"/>. For volumes written plane
    /// by plane, whose voxels are never held at once; cal_min and cal_max are the caller's (the data's range).
    /// </summary>
    public static void WriteStored(Stream file, bool compress, int nx, int ny, int nz, Affine affine, NiftiDataType type,
        double calMin, double calMax, Action<Stream> writeVoxels, NiftiWriteOptions? options = null)
    {
        if (type is not (NiftiDataType.UInt8 or NiftiDataType.UInt16 or NiftiDataType.Rgb24))
            throw new ArgumentException("Stored voxels are uint8, uint16 or rgb24.", nameof(type));
        options ??= new NiftiWriteOptions();
        var header = GeometryHeader(nx, ny, nz, affine, type, options);
        header.CalMin = (float)(options.CalMin ?? calMin);
        header.CalMax = (float)(options.CalMax ?? calMax);
        WriteStream(file, compress, header, writeVoxels);
    }

    /// <summary>True when a NIfTI file at <paramref name="path"/> is written gzip-compressed (the name ends in ".gz").</summary>
    public static bool CompressedName(string path) => path.EndsWith(".gz", StringComparison.OrdinalIgnoreCase);

    private static (NiftiHeader Header, Action<Stream> WriteVoxels) Prepare(Volume volume, NiftiWriteOptions? options)
    {
        options ??= new NiftiWriteOptions();
        var type = options.DataType;
        if (type == NiftiDataType.Rgb24)
            throw new ArgumentException("Write RGB volumes with NiftiFile.WriteRgb.", nameof(options));
        if (!NiftiDataTypes.IsWritable(type))
            throw new ArgumentException($"StackBuild writes uint8, int16, uint16, float32 and rgb24, not {NiftiDataTypes.Name(type)}.", nameof(options));

        var voxels = volume.Voxels;
        var header = GeometryHeader(volume.Nx, volume.Ny, volume.Nz, volume.Affine, type, options);
        var (min, max) = NiftiScaling.FiniteRange(voxels);
        header.CalMin = (float)(options.CalMin ?? min);
        header.CalMax = (float)(options.CalMax ?? max);
        if (NiftiDataTypes.IsInteger(type))
            (header.SclSlope, header.SclInter) = NiftiScaling.Choose(voxels, type);

        return (header, stream =>
        {
            switch (type)
            {
                case NiftiDataType.Float32: WriteFloats(stream, voxels); break;
                case NiftiDataType.UInt8: WriteIntegers<byte>(stream, voxels, header); break;
                case NiftiDataType.Int16: WriteIntegers<short>(stream, voxels, header); break;
                case NiftiDataType.UInt16: WriteIntegers<ushort>(stream, voxels, header); break;
            }
        });
    }

    /// <summary>
    /// Writes an RGB volume (rgb24: interleaved R, G, B bytes per voxel, i fastest). <see cref="NiftiWriteOptions.DataType"/>
    /// is ignored; cal_min/cal_max default to the smallest and largest byte.
    /// </summary>
    public static void WriteRgb(string path, int nx, int ny, int nz, byte[] rgbInterleaved, Affine affine, NiftiWriteOptions? options = null)
    {
        var header = RgbHeader(nx, ny, nz, rgbInterleaved, affine, options);
        WriteFile(path, header, stream => stream.Write(rgbInterleaved));
    }

    /// <summary>As <see cref="WriteRgb(string, int, int, int, byte[], Affine, NiftiWriteOptions?)"/>, into <paramref name="file"/>
    /// (gzip-compressed when <paramref name="compress"/>), for a caller that puts the file in place itself.</summary>
    public static void WriteRgb(Stream file, bool compress, int nx, int ny, int nz, byte[] rgbInterleaved, Affine affine, NiftiWriteOptions? options = null)
    {
        var header = RgbHeader(nx, ny, nz, rgbInterleaved, affine, options);
        WriteStream(file, compress, header, stream => stream.Write(rgbInterleaved));
    }

    private static NiftiHeader RgbHeader(int nx, int ny, int nz, byte[] rgbInterleaved, Affine affine, NiftiWriteOptions? options)
    {
        options ??= new NiftiWriteOptions();
        if (nx <= 0 || ny <= 0 || nz <= 0)
            throw new ArgumentOutOfRangeException(nameof(nx), "An RGB volume needs positive dimensions.");
        if (rgbInterleaved.LongLength != 3L * nx * ny * nz)
            throw new ArgumentException($"An RGB volume of {nx}×{ny}×{nz} needs {3L * nx * ny * nz} bytes, not {rgbInterleaved.LongLength}.", nameof(rgbInterleaved));
        var header = GeometryHeader(nx, ny, nz, affine, NiftiDataType.Rgb24, options);
        byte min = 255, max = 0;
        foreach (byte v in rgbInterleaved)
        {
            if (v < min) min = v;
            if (v > max) max = v;
        }
        header.CalMin = (float)(options.CalMin ?? min);
        header.CalMax = (float)(options.CalMax ?? max);
        return header;
    }

    // ---- writing ----

    /// <summary>A header for a 3D volume with the qform and sform both set from <paramref name="affine"/>, in the chosen unit.</summary>
    /// <summary>Most voxels NIfTI-1 stores along one axis (its dim fields are 16-bit signed; NIfTI-1 standard, nifti1.h).</summary>
    public const int MaxVoxelsPerAxis = short.MaxValue;

    private static NiftiHeader GeometryHeader(int nx, int ny, int nz, Affine affine, NiftiDataType type, NiftiWriteOptions options)
    {
        for (int r = 0; r < 3; r++)
        for (int c = 0; c < 4; c++)
            if (!double.IsFinite(affine[r, c])) throw new ArgumentException("The affine holds a value that is not finite.", nameof(affine));
        if (nx > MaxVoxelsPerAxis || ny > MaxVoxelsPerAxis || nz > MaxVoxelsPerAxis)
            throw new ArgumentException($"NIfTI-1 stores each dimension in 16 bits; {nx}×{ny}×{nz} exceeds {MaxVoxelsPerAxis}.");

        double unitsPerMm = options.Unit == SpatialUnit.Micrometre ? 1000.0 : 1.0;
        var stored = affine.Then(Affine.FromRows([unitsPerMm, 0, 0, 0], [0, unitsPerMm, 0, 0], [0, 0, unitsPerMm, 0]));
        var q = NiftiQuaternion.FromAffine(stored);
        var (qb, qc, qd) = NiftiQuaternion.Stored(q.B, q.C, q.D);
        return new NiftiHeader
        {
            Dim = [3, (short)nx, (short)ny, (short)nz, 1, 1, 1, 1],
            DataType = type,
            BitPix = NiftiDataTypes.BitPix(type),
            PixDim = [(float)q.Qfac, (float)q.Dx, (float)q.Dy, (float)q.Dz, 1, 1, 1, 1],
            VoxOffset = NiftiHeader.SingleFileMinimumOffset,
            SclSlope = 1,
            SclInter = 0,
            XyztUnits = (byte)(options.Unit == SpatialUnit.Micrometre ? 3 : 2), // NIFTI_UNITS_MICRON, NIFTI_UNITS_MM; no time unit
            Description = options.Description ?? "",
            QformCode = (short)options.QformCode,
            SformCode = (short)options.SformCode,
            QuaternB = qb,
            QuaternC = qc,
            QuaternD = qd,
            QOffsetX = (float)stored[0, 3],
            QOffsetY = (float)stored[1, 3],
            QOffsetZ = (float)stored[2, 3],
            SRowX = [(float)stored[0, 0], (float)stored[0, 1], (float)stored[0, 2], (float)stored[0, 3]],
            SRowY = [(float)stored[1, 0], (float)stored[1, 1], (float)stored[1, 2], (float)stored[1, 3]],
            SRowZ = [(float)stored[2, 0], (float)stored[2, 1], (float)stored[2, 2], (float)stored[2, 3]],
            Magic = "n+1",
        };
    }

    private static void WriteFile(string path, NiftiHeader header, Action<Stream> writeVoxels) =>
        AtomicFile.Write(path, file => WriteStream(file, CompressedName(path), header, writeVoxels));

    private static void WriteStream(Stream file, bool compress, NiftiHeader header, Action<Stream> writeVoxels)
    {
        var output = compress ? new GZipStream(file, CompressionLevel.Optimal, leaveOpen: true) : file;
        try
        {
            output.Write(header.ToBytes());
            output.Write(stackalloc byte[4]); // extension flag: no extensions (nifti1.h "extender")
            writeVoxels(output);
        }
        finally
        {
            if (compress) output.Dispose();
        }
    }

    private static void WriteFloats(Stream stream, float[] voxels)
    {
        if (BitConverter.IsLittleEndian)
        {
            stream.Write(MemoryMarshal.AsBytes(voxels.AsSpan()));
            return;
        }
        var buffer = ArrayPool<float>.Shared.Rent(ChunkElements);
        try
        {
            for (int start = 0; start < voxels.Length; start += ChunkElements)
            {
                int n = Math.Min(ChunkElements, voxels.Length - start);
                var chunk = buffer.AsSpan(0, n);
                voxels.AsSpan(start, n).CopyTo(chunk);
                ReverseBytes(chunk);
                stream.Write(MemoryMarshal.AsBytes(chunk));
            }
        }
        finally
        {
            ArrayPool<float>.Shared.Return(buffer);
        }
    }

    // Hot loop, called once per volume: compile it optimised at once rather than start in tier-0 code.
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private static void WriteIntegers<T>(Stream stream, float[] voxels, NiftiHeader header)
        where T : unmanaged, INumberBase<T>
    {
        var (tmin, tmax) = NiftiDataTypes.IntegerRange(header.DataType);
        double slope = header.SclSlope, inter = header.SclInter;
        double forNaN = NiftiScaling.StoredForNaN(slope, inter, tmin, tmax);
        var buffer = ArrayPool<T>.Shared.Rent(ChunkElements);
        try
        {
            for (int start = 0; start < voxels.Length; start += ChunkElements)
            {
                int n = Math.Min(ChunkElements, voxels.Length - start);
                var chunk = buffer.AsSpan(0, n);
                var source = voxels.AsSpan(start, n);
                for (int i = 0; i < n; i++)
                    chunk[i] = T.CreateTruncating(NiftiScaling.Stored(source[i], slope, inter, tmin, tmax, forNaN));
                if (!BitConverter.IsLittleEndian) ReverseBytes(chunk);
                stream.Write(MemoryMarshal.AsBytes(chunk));
            }
        }
        finally
        {
            ArrayPool<T>.Shared.Return(buffer);
        }
    }

    // ---- reading ----

    private sealed class OpenedFile(Stream stream, FileStream file, bool compressed) : IDisposable
    {
        public Stream Stream { get; } = stream;
        public long Length { get; } = file.Length;
        public bool Compressed { get; } = compressed;

        public void Dispose()
        {
            Stream.Dispose();
            file.Dispose();
        }
    }

    private static OpenedFile Open(string path)
    {
        if (Directory.Exists(path) && path.TrimEnd('/').EndsWith(".ome.zarr", StringComparison.OrdinalIgnoreCase))
            throw new InputProblemException(path, "this is an OME-Zarr image, which StackBuild writes but does not read",
                "give a NIfTI volume (.nii or .nii.gz); build with -o OUT.nii.gz for one, or open the image in an OME-Zarr viewer");
        if (Directory.Exists(path))
            throw new InputProblemException(path, "this is a folder, not a NIfTI file", "give the path of a .nii or .nii.gz file");
        if (!File.Exists(path))
            throw new InputProblemException(path, "the file does not exist", "check the path and its spelling");
        var file = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16);
        Span<byte> magic = stackalloc byte[2];
        int got = file.ReadAtLeast(magic, 2, throwOnEndOfStream: false);
        file.Position = 0;
        bool gz = got == 2 && magic[0] == 0x1f && magic[1] == 0x8b; // gzip member header (RFC 1952)
        Stream stream = gz ? new BufferedStream(new GZipStream(file, CompressionMode.Decompress, leaveOpen: true), 1 << 16) : file;
        return new OpenedFile(stream, file, gz);
    }

    private static NiftiHeader ReadHeaderFrom(OpenedFile opened, string path)
    {
        var bytes = new byte[NiftiHeader.HeaderSize];
        int got = opened.Stream.ReadAtLeast(bytes, bytes.Length, throwOnEndOfStream: false);
        if (opened.Compressed && got < NiftiHeader.HeaderSize)
            throw new InputProblemException(path, $"the gzip data ends after {got} bytes, inside the 348-byte NIfTI-1 header (truncated)",
                "copy or write the file again (was a transfer interrupted?)");
        return NiftiHeader.Parse(bytes.AsSpan(0, got), path);
    }

    /// <summary>Bytes of voxel data the header describes, refusing sizes StackBuild cannot hold before anything is allocated.</summary>
    private static long DataBytes(NiftiHeader header, string path)
    {
        double voxels = header.VoxelCountEstimate;
        if (voxels > MaximumVoxels)
            throw new InputProblemException(path, $"the header describes {Describe(header)}, more than the {MaximumVoxels:N0} voxels StackBuild reads from one file",
                "crop or downsample the volume, or check that the header is not damaged");
        int perVoxel = NiftiDataTypes.BytesPerVoxel(header.DataType);
        long elements = (long)voxels * (header.DataType == NiftiDataType.Rgb24 ? 3 : 1);
        if (elements > Array.MaxLength)
            throw new InputProblemException(path, $"{Describe(header)} of {NiftiDataTypes.Name(header.DataType)} is too large to hold in memory in one piece",
                "crop or downsample the volume");
        return (long)voxels * perVoxel;
    }

    private static string Describe(NiftiHeader h) => $"{string.Join(" × ", h.Shape)} voxels";

    private static void Skip(Stream stream, long count)
    {
        if (count <= 0) return;
        if (stream.CanSeek)
        {
            stream.Seek(count, SeekOrigin.Current);
            return;
        }
        var buffer = ArrayPool<byte>.Shared.Rent(8192);
        try
        {
            while (count > 0)
            {
                int n = stream.Read(buffer, 0, (int)Math.Min(count, buffer.Length));
                if (n == 0) throw new EndOfStreamException();
                count -= n;
            }
        }
        finally
        {
            ArrayPool<byte>.Shared.Return(buffer);
        }
    }

    private static Array ReadVoxels(Stream stream, NiftiHeader header)
    {
        int n = (int)(long)header.VoxelCountEstimate;
        bool big = header.IsBigEndian;
        return header.DataType switch
        {
            NiftiDataType.UInt8 => ReadArray<byte>(stream, n, big),
            NiftiDataType.Int8 => ReadArray<sbyte>(stream, n, big),
            NiftiDataType.Int16 => ReadArray<short>(stream, n, big),
            NiftiDataType.UInt16 => ReadArray<ushort>(stream, n, big),
            NiftiDataType.Int32 => ReadArray<int>(stream, n, big),
            NiftiDataType.Float32 => ReadArray<float>(stream, n, big),
            NiftiDataType.Float64 => ReadArray<double>(stream, n, big),
            NiftiDataType.Rgb24 => ReadArray<byte>(stream, checked(3 * n), false),
            _ => throw new InvalidOperationException("Datatype checked when the header was read."),
        };
    }

    private static T[] ReadArray<T>(Stream stream, int count, bool bigEndian) where T : unmanaged
    {
        var values = new T[count];
        var bytes = MemoryMarshal.AsBytes(values.AsSpan());
        // Spans of bytes are limited to int.MaxValue, so large arrays are read in pieces.
        const int piece = 1 << 30;
        for (long done = 0; done < bytes.Length;)
        {
            int n = (int)Math.Min(piece, bytes.Length - done);
            stream.ReadExactly(bytes.Slice((int)done, n));
            done += n;
        }
        if (bigEndian == BitConverter.IsLittleEndian) ReverseBytes(values.AsSpan());
        return values;
    }

    /// <summary>Reverses the byte order of each element in place.</summary>
    private static void ReverseBytes<T>(Span<T> values) where T : unmanaged
    {
        switch (System.Runtime.CompilerServices.Unsafe.SizeOf<T>())
        {
            case 2:
                var s = MemoryMarshal.Cast<T, short>(values);
                BinaryPrimitives.ReverseEndianness(s, s);
                break;
            case 4:
                var i = MemoryMarshal.Cast<T, int>(values);
                BinaryPrimitives.ReverseEndianness(i, i);
                break;
            case 8:
                var l = MemoryMarshal.Cast<T, long>(values);
                BinaryPrimitives.ReverseEndianness(l, l);
                break;
        }
    }

    /// <summary>Turns what can go wrong while reading a user's file into one clear <see cref="InputProblemException"/>.</summary>
    private static T Guarded<T>(string path, Func<T> read)
    {
        try
        {
            return read();
        }
        catch (EndOfStreamException e)
        {
            throw new InputProblemException(path, "the file ends before its voxel data does (truncated)",
                "copy or write the file again", e);
        }
        catch (InvalidDataException e)
        {
            throw new InputProblemException(path, $"the gzip compression is damaged ({e.Message.TrimEnd('.')})",
                "copy or write the file again; if it came from elsewhere, check with 'gzip -t'", e);
        }
        catch (UnauthorizedAccessException e)
        {
            throw new InputProblemException(path, "the file may not be read (permission denied)", "check the file's permissions", e);
        }
        catch (IOException e) when (e is FileNotFoundException or DirectoryNotFoundException)
        {
            throw new InputProblemException(path, "the file does not exist", "check the path and its spelling", e);
        }
    }
}
