using System.Buffers.Binary;
using System.IO.Compression;
using StackBuild.Geometry;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The NIfTI-1 standard's fixed layout and geometry rules (nifti1.h, struct nifti_1_header) on files StackBuild wrote.</summary>
public sealed class NiftiLayoutTests : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    [Theory]
    [InlineData(NiftiDataType.UInt8, 8)]
    [InlineData(NiftiDataType.Int16, 16)]
    [InlineData(NiftiDataType.UInt16, 16)]
    [InlineData(NiftiDataType.Float32, 32)]
    public void HeaderBytesSitWhereNifti1HPutsThem(NiftiDataType type, int bitpix)
    {
        var affine = Affine.FromAxes(AxisCodes.Parse("LIP"), 0.01, 0.01, 0.04, 9, 8, 7);
        var vol = NiftiPhantom.Make(9, 8, 7, affine, (i, j, k) => i + j + k);
        var path = _temp.File($"layout-{type}.nii.gz");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = type, Unit = SpatialUnit.Micrometre });
        var b = Gunzip(path);

        // Offsets and codes of nifti1.h (NIfTI-1 standard), written from memory and matching the offsets that
        // nifti_tool -disp_hdr (Debian nifti-bin 3.0.1) lists for each field (checked on 2026-12-02):
        Assert.Equal(348, BinaryPrimitives.ReadInt32LittleEndian(b.AsSpan(0)));            // int sizeof_hdr, byte 0
        Assert.Equal(3, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(40)));             // short dim[8], byte 40
        Assert.Equal(9, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(42)));
        Assert.Equal(8, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(44)));
        Assert.Equal(7, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(46)));
        Assert.Equal((short)type, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(70)));   // short datatype, byte 70
        Assert.Equal(bitpix, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(72)));        // short bitpix, byte 72
        Assert.Equal(10f, BinaryPrimitives.ReadSingleLittleEndian(b.AsSpan(80)), 1e-4);    // float pixdim[8], byte 76: pixdim[1] in µm
        float voxOffset = BinaryPrimitives.ReadSingleLittleEndian(b.AsSpan(108));          // float vox_offset, byte 108
        Assert.True(voxOffset >= 352, $"vox_offset {voxOffset}");
        Assert.Equal(3, b[123]);                                                           // char xyzt_units, byte 123: NIFTI_UNITS_MICRON
        Assert.Equal(1, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(252)));            // short qform_code, byte 252
        Assert.Equal(1, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(254)));            // short sform_code, byte 254
        Assert.Equal("n+1\0"u8.ToArray(), b.AsSpan(344, 4).ToArray());                     // char magic[4], byte 344
        Assert.Equal(new byte[4], b.AsSpan(348, 4).ToArray());                             // extension flag: no extensions
        Assert.Equal(352 + 9 * 8 * 7 * bitpix / 8, b.Length);                              // data follows at vox_offset, nothing after
    }

    [Fact]
    public void RgbIsDatatype128With24Bits()
    {
        var path = _temp.File("rgb.nii");
        NiftiFile.WriteRgb(path, 2, 2, 1, [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12], Affine.Identity);
        var b = File.ReadAllBytes(path);
        Assert.Equal(128, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(70)));  // nifti1.h NIFTI_TYPE_RGB24
        Assert.Equal(24, BinaryPrimitives.ReadInt16LittleEndian(b.AsSpan(72)));
        Assert.Equal(new byte[] { 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12 }, b.AsSpan(352).ToArray()); // interleaved triples
    }

    /// <summary>
    /// The qform (quaternion + qfac) and the sform must describe the same rigid affine, for right- and left-handed
    /// axis codes alike (nifti1.h: qfac = pixdim[0] = −1 flips the third axis).
    /// </summary>
    [Theory]
    [InlineData("RIP", -1)]
    [InlineData("LIP", 1)]
    [InlineData("RSA", -1)]
    [InlineData("RAS", 1)]
    [InlineData("LPI", -1)]
    [InlineData("LAS", -1)]
    [InlineData("PIR", 1)]
    public void QformRebuiltFromTheQuaternionEqualsTheSform(string axes, int qfac)
    {
        foreach (var (ax, az) in new[] { (0.0, 0.0), (12.5, -30.0), (179.0, 91.0) })
        {
            var affine = NiftiPhantom.Oblique(axes, 0.016, 0.016, 0.05, ax, az, (3.25, -4.5, 12.0));
            var vol = NiftiPhantom.Make(4, 3, 2, affine, (i, _, _) => i);
            var path = _temp.File($"q-{axes}.nii");
            NiftiFile.Write(path, vol);
            var h = NiftiFile.ReadHeader(path);
            Assert.Equal(qfac, h.PixDim[0]);
            // A unit quaternion with a ≥ 0 stored as (b, c, d): b² + c² + d² ≤ 1.
            Assert.True(h.QuaternB * h.QuaternB + h.QuaternC * h.QuaternC + h.QuaternD * h.QuaternD <= 1 + 1e-6);
            // float32 storage: 1e-6 mm on a 0.05 mm voxel is well below a micrometre.
            NiftiPhantom.AssertAffine(h.SformAffine, h.QformAffine, 1e-6);
            NiftiPhantom.AssertAffine(affine, h.SformAffine, 1e-6);
            if (ax == 0 && az == 0) Assert.Equal(axes, h.Affine.AxisCodes.Code);
        }
    }

    /// <summary>Analytic truths of nifti1.h's quaternion: identity, and a 90° turn about z is (b, c, d) = (0, 0, sin 45°).</summary>
    [Fact]
    public void QuaternionOfKnownRotations()
    {
        var identity = NiftiQuaternion.FromAffine(Affine.FromRows([2, 0, 0, 1], [0, 3, 0, 2], [0, 0, 4, 3]));
        Assert.Equal((0.0, 0.0, 0.0, 1.0, 2.0, 3.0, 4.0), identity);
        var turn = NiftiQuaternion.FromAffine(Affine.FromRows([0, -1, 0, 0], [1, 0, 0, 0], [0, 0, 1, 0]));
        Assert.Equal(0, turn.B, 12);
        Assert.Equal(0, turn.C, 12);
        Assert.Equal(Math.Sqrt(0.5), turn.D, 12);
        // 180° about x: a = 0, the branch where the trace is small.
        var flip = NiftiQuaternion.FromAffine(Affine.FromRows([1, 0, 0, 0], [0, -1, 0, 0], [0, 0, -1, 0]));
        Assert.Equal(1, flip.B, 12);
        var back = NiftiQuaternion.ToAffine(flip.B, flip.C, flip.D, 0, 0, 0, 1, 1, 1, flip.Qfac);
        NiftiPhantom.AssertAffine(Affine.FromRows([1, 0, 0, 0], [0, -1, 0, 0], [0, 0, -1, 0]), back, 1e-12);
    }

    [Fact]
    public void ShearedAffineKeepsTheExactSformAndTheNearestRotationInTheQform()
    {
        var sheared = Affine.FromRows([0.02, 0.004, 0, 1], [0, 0.02, 0, 2], [0, 0, 0.05, 3]);
        var vol = NiftiPhantom.Make(3, 3, 3, sheared, (i, _, _) => i);
        var path = _temp.File("shear.nii");
        NiftiFile.Write(path, vol);
        var h = NiftiFile.ReadHeader(path);
        NiftiPhantom.AssertAffine(sheared, h.SformAffine, 1e-7);
        var q = h.QformAffine;
        // The qform's columns are orthogonal; pixdim are the column norms of the affine.
        double dot = q[0, 0] * q[0, 1] + q[1, 0] * q[1, 1] + q[2, 0] * q[2, 1];
        Assert.Equal(0, dot, 1e-9);
        Assert.Equal(Math.Sqrt(0.02 * 0.02 + 0.004 * 0.004), h.PixDim[2], 1e-7);
    }

    private static byte[] Gunzip(string path)
    {
        using var gz = new GZipStream(File.OpenRead(path), CompressionMode.Decompress);
        using var ms = new MemoryStream();
        gz.CopyTo(ms);
        return ms.ToArray();
    }
}
