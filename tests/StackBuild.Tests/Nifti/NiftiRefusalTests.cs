using System.Buffers.Binary;
using System.IO.Compression;
using StackBuild.Geometry;
using StackBuild.IO;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Damaged, truncated or foreign files: always one <see cref="InputProblemException"/> naming the file, never another exception.</summary>
public sealed class NiftiRefusalTests : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    private byte[] ValidBytes(NiftiDataType type = NiftiDataType.Int16)
    {
        var path = _temp.File($"valid-{type}.nii");
        var vol = NiftiPhantom.Make(8, 6, 4, Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.05, 8, 6, 4), (i, j, k) => i * j - k);
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = type });
        return File.ReadAllBytes(path);
    }

    private InputProblemException Refused(byte[] bytes, string name = "bad.nii")
    {
        var path = _temp.File(name);
        File.WriteAllBytes(path, bytes);
        var e = Assert.Throws<InputProblemException>(() => NiftiFile.Read(path));
        Assert.Equal(path, e.File);
        Assert.DoesNotContain('\n', e.Message);
        Assert.False(string.IsNullOrWhiteSpace(e.Remedy));
        return e;
    }

    private static byte[] With(byte[] b, Action<byte[]> edit)
    {
        var copy = (byte[])b.Clone();
        edit(copy);
        return copy;
    }

    private static byte[] Gzip(byte[] data)
    {
        using var ms = new MemoryStream();
        using (var gz = new GZipStream(ms, CompressionLevel.Optimal, leaveOpen: true)) gz.Write(data);
        return ms.ToArray();
    }

    [Theory]
    [InlineData(0)]
    [InlineData(100)]
    [InlineData(348)]
    [InlineData(352)]
    [InlineData(500)]
    public void TruncatedFilesAreRefused(int keep)
    {
        var e = Refused(ValidBytes()[..keep]);
        Assert.Matches("short|truncated|ends|empty", e.Problem);
    }

    [Theory]
    [InlineData(0.02)]
    [InlineData(0.3)]
    [InlineData(0.6)]
    [InlineData(0.9)]
    public void TruncatedGzipIsRefused(double keepFraction)
    {
        var valid = ValidBytes(NiftiDataType.Float32);
        var rng = new Random(5);
        for (int at = 352; at < valid.Length; at++) valid[at] = (byte)rng.Next(256); // noise, so the voxels do not compress away
        var gz = Gzip(valid);
        var e = Refused(gz[..(int)(gz.Length * keepFraction)], "cut.nii.gz");
        Assert.Matches("truncated|gzip", e.Problem);
    }

    [Fact]
    public void CorruptGzipIsRefusedWithAClearMessage()
    {
        var gz = Gzip(ValidBytes());
        for (int n = 30; n < 60; n++) gz[n] ^= 0x5a;
        var e = Refused(gz, "corrupt.nii.gz");
        Assert.Matches("gzip|truncated|NIfTI", e.Problem);

        // A bad checksum in the gzip trailer (RFC 1952 CRC32) with intact data.
        var crc = Gzip(ValidBytes());
        crc[^8] ^= 0xff;
        Assert.Contains("gzip", Refused(crc, "crc.nii.gz").Problem);
    }

    [Fact]
    public void GarbageIsRefused()
    {
        var rng = new Random(7);
        var junk = new byte[4000];
        rng.NextBytes(junk);
        Assert.Contains("not a NIfTI-1 file", Refused(junk).Problem);
        Assert.Contains("not a NIfTI-1 file", Refused("this is a text file, not an image\n"u8.ToArray(), "text.nii").Problem);
        Assert.Contains("not a NIfTI-1 file", Refused([1, 2], "tiny.nii").Problem);
    }

    [Fact]
    public void NiftiTwoAnalyzeAndPairsAreNamed()
    {
        var v = ValidBytes();
        Assert.Contains("NIfTI-2", Refused(With(v, b => BinaryPrimitives.WriteInt32LittleEndian(b, 540))).Problem);
        Assert.Contains("two-file", Refused(With(v, b => "ni1\0"u8.CopyTo(b.AsSpan(344)))).Problem);
        Assert.Contains("magic", Refused(With(v, b => b.AsSpan(344, 4).Clear())).Problem);
    }

    [Theory]
    [InlineData(32, "complex64")]
    [InlineData(1024, "int64")]
    [InlineData(9999, "not defined")]
    public void UnknownOrUnsupportedDatatypesAreRefused(short code, string named)
    {
        Assert.Contains(named, Refused(With(ValidBytes(), b => BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(70), code))).Problem);
    }

    [Theory]
    [InlineData(40, 0)]     // dim[0] = 0
    [InlineData(40, 8)]     // dim[0] = 8
    [InlineData(42, 0)]     // dim[1] = 0
    [InlineData(44, -3)]    // dim[2] negative
    public void BadDimensionsAreRefused(int offset, short value)
    {
        Assert.Contains("dim", Refused(With(ValidBytes(), b => BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(offset), value))).Problem);
    }

    [Fact]
    public void AbsurdSizesAreRefusedBeforeAllocating()
    {
        // 32767 × 32767 × 32767 voxels: more than 2³¹, in a file of a few hundred bytes.
        var huge = With(ValidBytes(), b =>
        {
            for (int i = 1; i <= 3; i++) BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(40 + 2 * i), short.MaxValue);
        });
        Assert.Contains("more than", Refused(huge).Problem);
        Assert.Contains("more than", Refused(Gzip(huge), "huge.nii.gz").Problem);

        // 1000 × 1000 × 100 int16 (200 MB) claimed by a small file, plain and compressed.
        var big = With(ValidBytes(), b =>
        {
            BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(42), 1000);
            BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(44), 1000);
            BinaryPrimitives.WriteInt16LittleEndian(b.AsSpan(46), 100);
        });
        Assert.Contains("needs", Refused(big).Problem);
        Assert.Contains("more than a", Refused(Gzip(big), "big.nii.gz").Problem);
    }

    [Fact]
    public void MissingFilesAndFoldersAreRefused()
    {
        var missing = _temp.File("absent.nii.gz");
        Assert.Contains("does not exist", Assert.Throws<InputProblemException>(() => NiftiFile.Read(missing)).Problem);
        Assert.Contains("folder", Assert.Throws<InputProblemException>(() => NiftiFile.Read(_temp.Path)).Problem);
        Assert.Contains("does not exist", Assert.Throws<InputProblemException>(() => NiftiFile.ReadHeader(missing)).Problem);
    }

    [Fact]
    public void BigEndianHeaderIsToldBySizeofHdr()
    {
        // Swap every header field of a valid file to big-endian and the data too: still the same image.
        var v = ValidBytes(NiftiDataType.Int16);
        var big = (byte[])v.Clone();
        void Swap(int at, int size) => Array.Reverse(big, at, size);
        Swap(0, 4);
        for (int i = 0; i < 8; i++) Swap(40 + 2 * i, 2);
        foreach (int at in new[] { 70, 72, 252, 254 }) Swap(at, 2);
        for (int i = 0; i < 8; i++) Swap(76 + 4 * i, 4);
        foreach (int at in new[] { 108, 112, 116, 124, 128, 256, 260, 264, 268, 272, 276 }) Swap(at, 4);
        for (int i = 0; i < 12; i++) Swap(280 + 4 * i, 4);
        for (int at = 352; at < big.Length; at += 2) Swap(at, 2);
        var pathLittle = _temp.File("little.nii");
        var pathBig = _temp.File("big.nii");
        File.WriteAllBytes(pathLittle, v);
        File.WriteAllBytes(pathBig, big);
        var a = NiftiFile.Read(pathLittle);
        var b = NiftiFile.Read(pathBig);
        Assert.False(a.Header.IsBigEndian);
        Assert.True(b.Header.IsBigEndian);
        Assert.Equal(a.ToVolume().Voxels, b.ToVolume().Voxels);
        NiftiPhantom.AssertAffine(a.Affine, b.Affine, 0);
    }

    /// <summary>Random damage to a valid header or its data: the reader either reads it or refuses it clearly.</summary>
    [Theory]
    [InlineData(".nii")]
    [InlineData(".nii.gz")]
    public void RandomDamageNeverEscapesAsAnotherException(string extension)
    {
        var valid = ValidBytes(NiftiDataType.Float32);
        var rng = new Random(2026);
        var path = _temp.File("fuzz" + extension);
        for (int round = 0; round < 300; round++)
        {
            var b = (byte[])valid.Clone();
            int hits = 1 + rng.Next(4);
            for (int h = 0; h < hits; h++) b[rng.Next(round % 3 == 0 ? b.Length : 352)] = (byte)rng.Next(256);
            if (round % 5 == 0) b = b[..rng.Next(b.Length)];
            var bytes = extension == ".nii.gz" ? Gzip(b) : b;
            if (extension == ".nii.gz" && round % 2 == 0) bytes[rng.Next(10, bytes.Length)] ^= (byte)(1 + rng.Next(255));
            File.WriteAllBytes(path, bytes);
            try
            {
                var img = NiftiFile.Read(path);
                _ = img.ToVolume();
                _ = img.DataRange();
            }
            catch (InputProblemException)
            {
            }
        }
    }

    [Fact]
    public void SmallVoxOffsetIsReadAsTheSingleFileMinimum()
    {
        // Lenient where the standard allows no other reading: a .nii cannot hold data before byte 352.
        var v = ValidBytes();
        var zero = With(v, b => BinaryPrimitives.WriteSingleLittleEndian(b.AsSpan(108), 0f));
        var path = _temp.File("zero-offset.nii");
        File.WriteAllBytes(path, zero);
        var original = _temp.File("orig.nii");
        File.WriteAllBytes(original, v);
        Assert.Equal(NiftiFile.Read(original).ToVolume().Voxels, NiftiFile.Read(path).ToVolume().Voxels);
    }

    [Fact]
    public void SlopeZeroMeansNoScaling()
    {
        // nifti1.h: "If the scl_slope field is nonzero, then each voxel value in the dataset should be scaled".
        var v = ValidBytes();
        var path = _temp.File("slope0.nii");
        File.WriteAllBytes(path, With(v, b =>
        {
            BinaryPrimitives.WriteSingleLittleEndian(b.AsSpan(112), 0f);
            BinaryPrimitives.WriteSingleLittleEndian(b.AsSpan(116), 50f);
        }));
        var img = NiftiFile.Read(path);
        Assert.Null(img.Header.Scaling);
        Assert.Equal(BinaryPrimitives.ReadInt16LittleEndian(v.AsSpan(352 + 2 * 9)), img.VoxelValue(9));
    }
}
