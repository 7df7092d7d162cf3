using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// Checks against implementations outside StackBuild: the NIfTI files shipped with Debian's python3-nibabel,
/// nibabel itself (reading what we write and writing what we read), and nifti_tool from Debian's nifti-bin
/// (the reference NIfTI C library's own checker).
/// </summary>
public sealed class NiftiNibabelTests : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    /// <summary>Debian python3-nibabel's test data folder (nibabel/tests/data).</summary>
    private static string NibabelData(string file)
    {
        var path = Path.Combine("/usr/lib/python3/dist-packages/nibabel/tests/data", file);
        if (!File.Exists(path))
            Assert.Fail($"{path} is missing: install the Debian package python3-nibabel (tests/run.sh does this as root)");
        return path;
    }

    private static long FileIndex(int[] shape, params int[] index)
    {
        long at = 0, stride = 1;
        for (int d = 0; d < index.Length; d++) { at += index[d] * stride; stride *= shape[d]; }
        return at;
    }

    private static double Sum(NiftiImage img)
    {
        double s = 0;
        for (long i = 0; i < img.VoxelCount; i++) s += img.VoxelValue(i);
        return s;
    }

    // ---- 1. Debian python3-nibabel's test files. Expected values were read with nibabel 5.0.0 (Debian
    //         python3-nibabel, numpy 1.24.2) on 2026-12-02: nib.load(f).shape, header.get_zooms(),
    //         header['datatype'], img.affine, img.get_qform(), np.asanyarray(img.dataobj)[index].

    [Fact]
    public void ReadsNibabelsBigEndianAnatomical()
    {
        var img = NiftiFile.Read(NibabelData("anatomical.nii"));
        Assert.True(img.Header.IsBigEndian);                      // nibabel: header.endianness '>'
        Assert.Equal([33, 41, 25], img.Shape);
        Assert.Equal(NiftiDataType.Int16, img.DataType);         // datatype 4
        var (zx, zy, zz) = img.Affine.VoxelSizes;
        Assert.Equal((2.0, 2.0, 2.0), (zx, zy, zz));              // get_zooms() (2.0, 2.0, 2.0)
        NiftiPhantom.AssertAffine(new[] { new[] { -2.0, 0, 0, 32 }, [0, 2.0, 0, -40], [0, 0, 2.0, -16], [0, 0, 0, 1.0] }, img.Affine, 0);
        Assert.Equal("LAS", img.Affine.AxisCodes.Code);           // nib.aff2axcodes: ('L', 'A', 'S')
        Assert.Equal(2, img.Header.QformCode);
        Assert.Equal(2, img.Header.SformCode);
        Assert.Equal("spm - 3D normalized", img.Header.Description);
        Assert.Equal(10712, img.VoxelValue(0));                   // flat (Fortran order) index 0
        Assert.Equal(10463, img.VoxelValue(1));
        Assert.Equal(4222, img.VoxelValue(1000));
        Assert.Equal(9798, img.VoxelValue(FileIndex(img.Shape, 1, 2, 3)));
        Assert.Equal(11881, img.VoxelValue(FileIndex(img.Shape, 16, 20, 12)));
        Assert.Equal(2971, img.VoxelValue(33824));
        Assert.Equal((-610.0, 30393.0), img.DataRange());
        Assert.Equal(284166082.0, Sum(img));
        NiftiPhantom.AssertAffine(img.Affine, img.Header.QformAffine, 1e-12); // get_qform() equals the sform here
    }

    [Fact]
    public void ReadsNibabelsGzipped4DWithExtensions()
    {
        var img = NiftiFile.Read(NibabelData("example4d.nii.gz"));
        Assert.False(img.Header.IsBigEndian);
        Assert.Equal([128, 96, 24, 2], img.Shape);
        Assert.Equal(NiftiDataType.Int16, img.DataType);
        Assert.Equal(416, img.Header.VoxOffset);                  // data offset 416: two header extensions to skip
        var (zx, zy, zz) = img.Affine.VoxelSizes;
        Assert.Equal(2.0, zx, 1e-6);
        Assert.Equal(2.0, zy, 1e-6);
        Assert.Equal(2.1999990940093994, zz, 1e-6);               // get_zooms()[2]
        Assert.Equal(2000f, img.Header.PixDim[4]);                // get_zooms()[3] (TR)
        Assert.Equal(
            new[]
            {
                new[] { -2.0, 6.714715653593746e-19, 9.081024511081715e-18, 117.8551025390625 },
                [-6.714715653593746e-19, 1.9737114906311035, -0.35552823543548584, -35.72294235229492],
                [8.25548088896093e-18, 0.3232076168060303, 2.171081781387329, -7.248798370361328],
                [0, 0, 0, 1.0],
            }.SelectMany(r => r), img.Affine.ToRows().SelectMany(r => r));
        // nibabel's get_qform(); it computes the quaternion's a in float32 (a ≈ 3.2e-5), nifti1_io.c in double
        // (a < 1e-7 is read as 0), so entries that depend on a differ by up to 1.3e-4.
        NiftiPhantom.AssertAffine(new[]
        {
            new[] { -1.999999995978187, 1.0282396754185892e-05, 0.00013905980362440367, 117.8551025390625 },
            [-1.0282396754185892e-05, 1.9737114380364735, -0.3555282247524397, -35.72294235229492],
            [0.00012641805535562603, 0.32320761014906196, 2.1710816833341227, -7.248798370361328],
            [0, 0, 0, 1.0],
        }, img.Header.QformAffine, 2e-4);
        Assert.Equal(1, img.Header.QformCode);
        Assert.Equal(1, img.Header.SformCode);
        Assert.Equal(1162f, img.Header.CalMax);
        Assert.Equal(2, img.VolumeCount);
        Assert.Equal(265, img.ToVolume(0)[64, 48, 12]);
        Assert.Equal(266, img.ToVolume(1)[64, 48, 12]);
        Assert.Equal(1162, img.VoxelValue(FileIndex(img.Shape, 64, 49, 0, 0)));   // argmax
        Assert.Equal(101985356.0, Sum(img));
        Assert.Equal("LAS", img.Affine.AxisCodes.Code);
    }

    [Fact]
    public void ReadsNibabelsStandardWithOnlyAnSform()
    {
        var img = NiftiFile.Read(NibabelData("standard.nii.gz"));
        Assert.Equal([4, 5, 7], img.Shape);
        Assert.Equal(NiftiDataType.UInt8, img.DataType);
        Assert.Equal(0, img.Header.QformCode);
        Assert.Equal(2, img.Header.SformCode);
        Assert.Equal(NiftiAffineSource.Sform, img.Header.AffineSource);
        NiftiPhantom.AssertAffine(new[] { new[] { 1.0, 0, 0, 0 }, [0, 3.0, 0, 0], [0, 0, 2.0, 0], [0, 0, 0, 1.0] }, img.Affine, 0);
        Assert.Equal(255, img.VoxelValue(FileIndex(img.Shape, 1, 2, 3)));
        Assert.Equal(255, img.VoxelValue(FileIndex(img.Shape, 0, 4, 6)));
        Assert.Equal(0, img.VoxelValue(FileIndex(img.Shape, 2, 2, 3)));
        Assert.Equal(7650.0, Sum(img));                            // 30 voxels of 255
        var perSlice = Enumerable.Range(0, 7).Select(k => img.ToVolume().Plane(k).ToArray().Sum()).ToArray();
        Assert.Equal([1020f, 1785, 255, 1020, 1275, 510, 1785], perSlice); // data.sum(axis=(0, 1))
    }

    // ---- 3. nibabel reads what StackBuild wrote (tests/tools/nibabel_check.py).

    private sealed record Written(string Path, Volume Volume, NiftiWriteOptions Options, string Axes);

    [Fact]
    public void NibabelReadsWhatWeWrite()
    {
        var cases = new List<Written>();
        int n = 0;
        foreach (var (axes, type, unit, gz) in new[]
                 {
                     ("RIP", NiftiDataType.Float32, SpatialUnit.Millimetre, false),
                     ("LIP", NiftiDataType.UInt8, SpatialUnit.Micrometre, true),
                     ("RSA", NiftiDataType.Int16, SpatialUnit.Millimetre, true),
                     ("RAS", NiftiDataType.UInt16, SpatialUnit.Micrometre, false),
                     ("LPI", NiftiDataType.Float32, SpatialUnit.Micrometre, true),
                     ("PIR", NiftiDataType.Int16, SpatialUnit.Micrometre, false),
                 })
        {
            var affine = NiftiPhantom.Oblique(axes, 0.016, 0.016, 0.05, n == 4 ? 7.5 : 0, n == 4 ? -12 : 0, (1.25, -3.5, 8));
            // Fractions for the integer types so that scaling is exercised, except uint8 which gets whole numbers.
            var vol = NiftiPhantom.Make(9, 7, 5, affine, (i, j, k) =>
                type == NiftiDataType.UInt8 ? (i * 13 + j * 5 + k * 29) % 256 : (float)Math.Sin(i * 0.7 + j * 0.3 - k) * 1000 + i * 0.01f);
            var options = new NiftiWriteOptions { DataType = type, Unit = unit, Description = $"phantom {axes} {type}" };
            var path = _temp.File($"ours-{n++}-{axes}-{type}.nii" + (gz ? ".gz" : ""));
            NiftiFile.Write(path, vol, options);
            cases.Add(new Written(path, vol, options, axes));
        }
        var rgbPath = _temp.File("ours-rgb.nii.gz");
        var rgbAffine = Affine.FromAxes(AxisCodes.Parse("RIP"), 0.01, 0.01, 0.04, 5, 4, 3);
        var rgb = Enumerable.Range(0, 3 * 5 * 4 * 3).Select(i => (byte)(i * 11 % 256)).ToArray();
        NiftiFile.WriteRgb(rgbPath, 5, 4, 3, rgb, rgbAffine);

        var reports = NiftiPython.RunJsonList("nibabel_check.py", [.. cases.Select(c => c.Path), rgbPath]);
        Assert.Equal(cases.Count + 1, reports.Length);
        for (int c = 0; c < cases.Count; c++)
        {
            var (written, nib) = (cases[c], reports[c]);
            var because = Path.GetFileName(written.Path);
            double unitsPerMm = written.Options.Unit == SpatialUnit.Micrometre ? 1000 : 1;
            Assert.Equal([9, 7, 5], nib.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
            Assert.Equal((int)written.Options.DataType, nib.GetProperty("datatype").GetInt32());
            Assert.Equal(written.Axes, nib.GetProperty("axcodes").GetString());
            Assert.Equal(written.Options.Unit == SpatialUnit.Micrometre ? "micron" : "mm", nib.GetProperty("units")[0].GetString());
            // nibabel reports the affine in the file's unit; ours is in mm.
            NiftiPhantom.AssertAffine(NiftiPython.Matrix(nib.GetProperty("affine")), written.Volume.Affine, 1e-6, 1 / unitsPerMm);
            var (zi, zj, zk) = written.Volume.Affine.VoxelSizes;
            var zooms = nib.GetProperty("zooms").EnumerateArray().Select(e => e.GetDouble()).ToArray();
            Assert.Equal(zi * unitsPerMm, zooms[0], 1e-5 * unitsPerMm);
            Assert.Equal(zk * unitsPerMm, zooms[2], 1e-5 * unitsPerMm);
            // qform and sform agree (relative to the size of the entries: µm files have larger numbers).
            double scale = 10 * unitsPerMm;
            Assert.True(nib.GetProperty("qform_sform_max_difference").GetDouble() <= 1e-6 * scale, because);
            Assert.Equal(written.Volume.Affine.Determinant3 < 0 ? -1 : 1, nib.GetProperty("qfac").GetDouble());
            Assert.Equal(1, nib.GetProperty("qform_code").GetInt32());
            Assert.Equal(1, nib.GetProperty("sform_code").GetInt32());
            Assert.Equal(written.Options.Description, nib.GetProperty("descrip").GetString());
            Assert.Equal(352, nib.GetProperty("vox_offset").GetInt32());

            // Voxel values nibabel reads (with the scaling we stored) match what we wrote, within half a step.
            var ours = NiftiFile.Read(written.Path);
            double halfStep = (ours.Header.Scaling?.Slope ?? 0) / 2;
            Assert.Equal(ours.Header.Scaling?.Slope ?? 1, nib.GetProperty("scl_slope").GetDouble(), 1e-12);
            foreach (var at in nib.GetProperty("values_at").EnumerateObject())
            {
                long index = long.Parse(at.Name);
                double theirs = at.Value.GetDouble();
                Assert.Equal(ours.VoxelValue(index), theirs, Math.Abs(theirs) * 1e-7 + 1e-9);
                Assert.True(Math.Abs(written.Volume.Voxels[index] - theirs) <= halfStep * 1.001 + 1e-4, $"{because} voxel {index}");
            }
            Assert.Equal(Sum(ours), nib.GetProperty("sum").GetDouble(), Math.Abs(Sum(ours)) * 1e-9 + 1e-6);
            Assert.Equal(written.Volume.Voxels.Select(v => (double)v).Sum(), nib.GetProperty("sum").GetDouble(), halfStep * 9 * 7 * 5 + 1e-2);
        }

        var rgbReport = reports[^1];
        Assert.Equal(128, rgbReport.GetProperty("datatype").GetInt32());
        Assert.Equal("RIP", rgbReport.GetProperty("axcodes").GetString());
        long[] sums = [0, 0, 0];
        for (int i = 0; i < rgb.Length; i++) sums[i % 3] += rgb[i];
        Assert.Equal(sums, rgbReport.GetProperty("channel_sums").EnumerateArray().Select(e => e.GetInt64()));
        foreach (var at in rgbReport.GetProperty("rgb_at").EnumerateObject())
        {
            int v = int.Parse(at.Name);
            Assert.Equal(rgb.AsSpan(3 * v, 3).ToArray().Select(b => (int)b), at.Value.EnumerateArray().Select(e => e.GetInt32()));
        }
    }

    // ---- 3b. StackBuild reads what nibabel wrote (tests/tools/nibabel_write.py).

    [Fact]
    public void WeReadWhatNibabelWrites()
    {
        var cases = NiftiPython.RunJsonList("nibabel_write.py", _temp.Path);
        Assert.Equal(7, cases.Length);
        foreach (var nib in cases)
        {
            var name = nib.GetProperty("file").GetString()!;
            var img = NiftiFile.Read(_temp.File(name));
            Assert.Equal(nib.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()), img.Shape);
            Assert.Equal(nib.GetProperty("datatype").GetInt32(), (int)img.DataType);
            Assert.Equal(nib.GetProperty("big_endian").GetBoolean(), img.Header.IsBigEndian);
            double mmPerUnit = nib.GetProperty("units").GetString() == "micron" ? 0.001 : 1;
            NiftiPhantom.AssertAffine(NiftiPython.Matrix(nib.GetProperty("affine")), img.Affine, 1e-6, mmPerUnit);
            Assert.Equal(nib.GetProperty("sform_code").GetInt32() > 0 ? NiftiAffineSource.Sform : NiftiAffineSource.Qform, img.Header.AffineSource);

            if (nib.TryGetProperty("rgb", out var rgb))
            {
                Assert.Equal(rgb.EnumerateArray().Select(e => (byte)e.GetInt32()), img.RgbBytes!);
                continue;
            }
            var values = nib.GetProperty("values").EnumerateArray().Select(e => e.GetDouble()).ToArray();
            Assert.Equal(values.Length, img.VoxelCount);
            for (int i = 0; i < values.Length; i++)
                Assert.True(Math.Abs(values[i] - img.VoxelValue(i)) <= Math.Abs(values[i]) * 1e-7, $"{name} voxel {i}: nibabel {values[i]}, ours {img.VoxelValue(i)}");
            // float32 views agree too, volume by volume.
            for (int t = 0; t < img.VolumeCount; t++)
            {
                var vol = img.ToVolume(t);
                for (int i = 0; i < vol.Voxels.Length; i++)
                    Assert.Equal((float)values[t * vol.Voxels.Length + i], vol.Voxels[i], Math.Abs(values[t * vol.Voxels.Length + i]) * 1e-6);
            }
            if (nib.TryGetProperty("intended", out var intended) && nib.GetProperty("scl_slope").GetDouble() != 1)
            {
                // Float data nibabel stored as scaled int16: we recover it within half a step.
                double half = nib.GetProperty("scl_slope").GetDouble() / 2;
                var wanted = intended.EnumerateArray().Select(e => e.GetDouble()).ToArray();
                for (int i = 0; i < wanted.Length; i++) Assert.True(Math.Abs(wanted[i] - img.VoxelValue(i)) <= half * 1.001, $"{name} voxel {i}");
            }
        }
    }

    // ---- 4. nifti_tool (Debian nifti-bin, the reference NIfTI C library) checks our headers.

    [Fact]
    public void NiftiToolFindsOurHeadersValid()
    {
        const string tool = "/usr/bin/nifti_tool";
        if (!File.Exists(tool))
            Assert.Fail($"{tool} is missing: install the Debian package nifti-bin (tests/run.sh does this as root)");
        var files = new List<string>();
        int n = 0;
        foreach (var (axes, type, unit) in new[]
                 {
                     ("RIP", NiftiDataType.Float32, SpatialUnit.Millimetre), ("LPI", NiftiDataType.Int16, SpatialUnit.Micrometre),
                     ("RSA", NiftiDataType.UInt16, SpatialUnit.Millimetre), ("LIP", NiftiDataType.UInt8, SpatialUnit.Micrometre),
                 })
        {
            var affine = NiftiPhantom.Oblique(axes, 0.02, 0.02, 0.06, 5, 10, (0, 1, 2));
            var path = _temp.File($"tool-{n++}.nii" + (n % 2 == 0 ? ".gz" : ""));
            NiftiFile.Write(path, NiftiPhantom.Make(6, 5, 4, affine, (i, j, k) => i - j * 0.5f + k), new NiftiWriteOptions { DataType = type, Unit = unit });
            files.Add(path);
        }
        var rgbPath = _temp.File("tool-rgb.nii");
        NiftiFile.WriteRgb(rgbPath, 2, 2, 2, new byte[24], Affine.Identity);
        files.Add(rgbPath);

        var check = RunTool(tool, ["-check_hdr", "-check_nim", "-infiles", .. files]);
        foreach (var f in files)
        {
            Assert.Contains($"header IS GOOD for file {f}", check);
            Assert.Contains($"nifti_image IS GOOD for file {f}", check);
        }
        Assert.DoesNotContain("FAILURE", check);

        // nifti_tool's own reading of the fields (its -disp_hdr lists name, offset, count, values).
        var fields = RunTool(tool, ["-disp_hdr", "-field", "vox_offset", "-field", "datatype", "-field", "qform_code", "-field", "magic", "-infiles", files[1]]);
        Assert.Matches(@"vox_offset\s+108\s+1\s+352", fields);
        Assert.Matches(@"datatype\s+70\s+1\s+4\b", fields);
        Assert.Matches(@"qform_code\s+252\s+1\s+1\b", fields);
        Assert.Matches(@"magic\s+344\s+4\s+n\+1", fields);
    }

    private static string RunTool(string tool, IEnumerable<string> args)
    {
        var (_, stdout, stderr) = NiftiPython.Process(tool, args);
        return stdout + stderr;
    }
}
