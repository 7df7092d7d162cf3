using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Write then read with StackBuild's own NIfTI code: values, scaling, geometry and header fields survive.</summary>
public sealed class NiftiRoundTripTests : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    private static readonly Affine Rip = Affine.FromAxes(AxisCodes.Parse("RIP"), 0.02, 0.02, 0.05, 7, 6, 5, (1.5, -2, 3));

    private static Volume Ramp(Func<int, int, int, float> f) => NiftiPhantom.Make(7, 6, 5, Rip, f);

    [Theory]
    [InlineData("f.nii")]
    [InlineData("f.nii.gz")]
    public void Float32KeepsEveryValueExactlyIncludingNaN(string name)
    {
        var vol = Ramp((i, j, k) => (i - 3) * 0.123f + j * 17.5f - k * 1e-3f);
        vol[2, 3, 4] = float.NaN;
        var path = _temp.File(name);
        NiftiFile.Write(path, vol);

        var img = NiftiFile.Read(path);
        Assert.Equal([7, 6, 5], img.Shape);
        Assert.Equal(NiftiDataType.Float32, img.DataType);
        var back = img.ToVolume();
        for (int n = 0; n < vol.Voxels.Length; n++)
            Assert.Equal(BitConverter.SingleToInt32Bits(vol.Voxels[n]), BitConverter.SingleToInt32Bits(back.Voxels[n]));
        Assert.Null(img.Header.Scaling);
        NiftiPhantom.AssertAffine(Rip, img.Affine, 1e-6);
        Assert.Equal("RIP", img.Affine.AxisCodes.Code);
        // gzip is chosen by the file name and recognised by the content (RFC 1952 magic 1f 8b)
        var head = File.ReadAllBytes(path).AsSpan(0, 2).ToArray();
        Assert.Equal(name.EndsWith(".gz"), head[0] == 0x1f && head[1] == 0x8b);
    }

    [Theory]
    [InlineData(NiftiDataType.UInt8, 0, 255)]
    [InlineData(NiftiDataType.Int16, -32768, 32767)]
    [InlineData(NiftiDataType.UInt16, 0, 65535)]
    public void WholeNumbersInRangeAreStoredUnscaled(NiftiDataType type, int lo, int hi)
    {
        var vol = Ramp((i, j, k) => (i * 31 + j * 7 + k * 3) % 200 + (lo < 0 ? -100 : 0));
        vol[0, 0, 0] = lo;
        vol[6, 5, 4] = hi;
        var path = _temp.File($"whole-{type}.nii");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = type });

        var img = NiftiFile.Read(path);
        Assert.Equal(type, img.DataType);
        Assert.Equal(1f, img.Header.SclSlope);
        Assert.Equal(0f, img.Header.SclInter);
        Assert.Equal(vol.Voxels, img.ToVolume().Voxels);
        Assert.Equal(lo, img.Header.CalMin);
        Assert.Equal(hi, img.Header.CalMax);
    }

    [Theory]
    [InlineData(NiftiDataType.UInt8)]
    [InlineData(NiftiDataType.Int16)]
    [InlineData(NiftiDataType.UInt16)]
    public void FractionsOrOutOfRangeValuesAreScaledWithinHalfAStep(NiftiDataType type)
    {
        // Non-integer values and a range no integer type holds unscaled.
        var vol = Ramp((i, j, k) => -70000.25f + i * 1234.567f + j * 9876.5f + k * 40000.125f);
        var path = _temp.File($"scaled-{type}.nii.gz");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = type });

        var img = NiftiFile.Read(path);
        var scaling = img.Header.Scaling;
        Assert.NotNull(scaling);
        var (min, max) = (vol.Voxels.Min(), vol.Voxels.Max());
        var (tmin, tmax) = type switch { NiftiDataType.UInt8 => (0, 255), NiftiDataType.Int16 => (-32768, 32767), _ => (0, 65535) };
        // The rule: the data range fills the type's whole range.
        Assert.Equal((max - min) / (tmax - tmin), scaling!.Value.Slope, (max - min) / (tmax - tmin) * 1e-6);
        double halfStep = scaling.Value.Slope / 2;
        var back = img.ToVolume().Voxels;
        for (int n = 0; n < back.Length; n++)
        {
            Assert.True(Math.Abs(back[n] - vol.Voxels[n]) <= halfStep * 1.001 + Math.Abs(vol.Voxels[n]) * 1e-6,
                $"voxel {n}: wrote {vol.Voxels[n]}, read {back[n]}, half step {halfStep}");
            Assert.Equal(img.VoxelValue(n), back[n], Math.Abs(back[n]) * 1e-6 + 1e-6);
        }
    }

    [Fact]
    public void ConstantFractionIsStoredInTheIntercept()
    {
        var vol = Ramp((_, _, _) => 0.3f);
        var path = _temp.File("constant.nii");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = NiftiDataType.UInt8 });
        var img = NiftiFile.Read(path);
        Assert.All(img.ToVolume().Voxels, v => Assert.Equal(0.3f, v));
        Assert.Equal(0.3f, img.Header.SclInter);
    }

    [Fact]
    public void NaNInAnIntegerTypeBecomesTheValueNearestZero()
    {
        var vol = Ramp((i, j, k) => i + j + k - 4.5f);
        vol[1, 1, 1] = float.NaN;
        vol[2, 2, 2] = float.PositiveInfinity;
        vol[3, 3, 3] = float.NegativeInfinity;
        var path = _temp.File("nan.nii");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = NiftiDataType.Int16 });
        var img = NiftiFile.Read(path);
        var back = img.ToVolume();
        double slope = img.Header.Scaling!.Value.Slope;
        Assert.True(Math.Abs(back[1, 1, 1]) <= slope, $"NaN came back as {back[1, 1, 1]}");
        var finite = vol.Voxels.Where(float.IsFinite).ToArray();
        Assert.Equal(finite.Max(), back[2, 2, 2], slope);
        Assert.Equal(finite.Min(), back[3, 3, 3], slope);
        Assert.Equal(finite.Min(), img.Header.CalMin, 1e-5);
        Assert.Equal(finite.Max(), img.Header.CalMax, 1e-5);
    }

    [Fact]
    public void RgbKeepsTheBytesAndGreyIsRec601Luminance()
    {
        int nx = 4, ny = 3, nz = 2;
        var rgb = new byte[3 * nx * ny * nz];
        for (int n = 0; n < rgb.Length; n++) rgb[n] = (byte)(n * 37 % 256);
        var path = _temp.File("colour.nii.gz");
        NiftiFile.WriteRgb(path, nx, ny, nz, rgb, Rip, new NiftiWriteOptions { Description = "H&E" });

        var img = NiftiFile.Read(path);
        Assert.Equal(NiftiDataType.Rgb24, img.DataType);
        Assert.Equal(24, img.Header.BitPix);
        Assert.Equal(rgb, img.RgbBytes);
        var grey = img.ToVolume();
        for (int v = 0; v < nx * ny * nz; v++)
        {
            // ITU-R BT.601 luma weights
            double expected = 0.299 * rgb[3 * v] + 0.587 * rgb[3 * v + 1] + 0.114 * rgb[3 * v + 2];
            Assert.Equal(expected, grey.Voxels[v], 1e-4);
            Assert.Equal(expected, img.VoxelValue(v), 1e-9);
        }
        Assert.Equal("H&E", img.Header.Description);
    }

    [Fact]
    public void MicrometresAreStoredInTheHeaderButReadBackInMillimetres()
    {
        var vol = Ramp((i, _, _) => i);
        var path = _temp.File("micro.nii");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { Unit = SpatialUnit.Micrometre });
        var h = NiftiFile.ReadHeader(path);
        Assert.Equal(3, h.XyztUnits); // nifti1.h NIFTI_UNITS_MICRON
        Assert.Equal(20f, h.PixDim[1], 1e-4);
        Assert.Equal(50f, h.PixDim[3], 1e-4);
        Assert.Equal(Rip[0, 3] * 1000, h.SRowX[3], 1e-2);
        Assert.Equal(Rip[0, 3] * 1000, h.QOffsetX, 1e-2);
        var img = NiftiFile.Read(path);
        NiftiPhantom.AssertAffine(Rip, img.Affine, 1e-6);
        NiftiPhantom.AssertAffine(Rip, img.Header.QformAffine, 1e-6);
    }

    [Fact]
    public void FourDimensionalVolumesAreReadOneAtATime()
    {
        // StackBuild writes 3D only; build a 4D file from a 3D one by editing dim (nifti1.h: dim[0] = 4, dim[4] = volumes).
        var vol = NiftiPhantom.Make(3, 2, 2, Rip, (i, j, k) => i + 10 * j + 100 * k);
        var twice = NiftiPhantom.Make(3, 2, 4, Rip, (i, j, k) => k < 2 ? i + 10 * j + 100 * k : -(i + 10 * j + 100 * (k - 2)));
        var path = _temp.File("four.nii");
        NiftiFile.Write(path, twice, new NiftiWriteOptions { DataType = NiftiDataType.Int16 });
        var bytes = File.ReadAllBytes(path);
        BitConverter.GetBytes((short)4).CopyTo(bytes, 40);
        BitConverter.GetBytes((short)2).CopyTo(bytes, 46);
        BitConverter.GetBytes((short)2).CopyTo(bytes, 48);
        File.WriteAllBytes(path, bytes);

        var img = NiftiFile.Read(path);
        Assert.Equal([3, 2, 2, 2], img.Shape);
        Assert.Equal(2, img.VolumeCount);
        Assert.Equal(vol.Voxels, img.ToVolume(0).Voxels);
        Assert.Equal(vol.Voxels.Select(v => -v), img.ToVolume(1).Voxels);
        Assert.Throws<ArgumentOutOfRangeException>(() => img.ToVolume(2));
    }

    [Fact]
    public void CalibrationAndDescriptionAreWrittenAsAsked()
    {
        var vol = Ramp((i, _, _) => i);
        var path = _temp.File("cal.nii");
        var longText = "section series 12, phantom — " + new string('x', 100);
        NiftiFile.Write(path, vol, new NiftiWriteOptions { CalMin = -5, CalMax = 99.5, Description = longText, SformCode = NiftiXformCode.AlignedAnat });
        var h = NiftiFile.ReadHeader(path);
        Assert.Equal(-5f, h.CalMin);
        Assert.Equal(99.5f, h.CalMax);
        Assert.Equal(79, h.Description.Length); // nifti1.h: descrip is char[80], zero-terminated
        Assert.StartsWith("section series 12, phantom ? xxx", h.Description);
        Assert.Equal(1, h.QformCode);
        Assert.Equal(2, h.SformCode);
    }

    [Fact]
    public void DefaultCalibrationIsTheDataRange()
    {
        var vol = Ramp((i, j, k) => i * 2.5f - j + k);
        var path = _temp.File("range.nii");
        NiftiFile.Write(path, vol);
        var h = NiftiFile.ReadHeader(path);
        Assert.Equal(vol.Voxels.Min(), h.CalMin);
        Assert.Equal(vol.Voxels.Max(), h.CalMax);
        var range = NiftiFile.Read(path).DataRange();
        Assert.Equal(vol.Voxels.Min(), range!.Value.Min);
        Assert.Equal(vol.Voxels.Max(), range.Value.Max);
    }

    [Theory]
    [InlineData(NiftiDataType.Int8)]
    [InlineData(NiftiDataType.Int32)]
    [InlineData(NiftiDataType.Float64)]
    [InlineData(NiftiDataType.Rgb24)]
    public void TypesOutsideTheWriteListAreRefusedByWrite(NiftiDataType type)
    {
        var path = _temp.File("no.nii");
        Assert.Throws<ArgumentException>(() => NiftiFile.Write(path, Ramp((i, _, _) => i), new NiftiWriteOptions { DataType = type }));
        Assert.False(File.Exists(path));
    }

    [Fact]
    public void WritingLeavesNoTemporaryFileBehindEvenWhenTheRenameFails()
    {
        NiftiFile.Write(_temp.File("ok.nii.gz"), Ramp((i, _, _) => i));
        Assert.Equal(["ok.nii.gz"], Directory.GetFiles(_temp.Path).Select(Path.GetFileName));

        // A folder at the output path is refused before anything is written.
        var blocked = _temp.File("blocked.nii");
        Directory.CreateDirectory(blocked);
        Assert.Contains("is a folder", Assert.Throws<InputProblemException>(() => NiftiFile.Write(blocked, Ramp((i, _, _) => i))).Problem);
        Assert.Empty(_temp.LeftoverTempFiles());

        // A folder that appears while the data is written makes the final rename fail: the temporary file goes too.
        var late = _temp.File("late.nii");
        var failed = Assert.ThrowsAny<IOException>(() => AtomicFile.Write(late, s =>
        {
            s.Write(new byte[1000]);
            Directory.CreateDirectory(late);
        }));
        Assert.Contains(late, failed.Message);
        Assert.Empty(_temp.LeftoverTempFiles());

        var missingFolder = Path.Combine(_temp.Path, "no-such-folder", "x.nii");
        Assert.Throws<InputProblemException>(() => NiftiFile.Write(missingFolder, Ramp((i, _, _) => i)));
        Assert.Empty(_temp.LeftoverTempFiles());
    }
}
