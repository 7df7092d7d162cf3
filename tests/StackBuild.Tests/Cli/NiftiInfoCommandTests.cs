using System.Text.Json;
using StackBuild.Cli;
using StackBuild.Geometry;
using StackBuild.Nifti;
using Xunit;

namespace StackBuild.Tests;

/// <summary><c>stackbuild info</c>: text for people, one JSON object for scripts, one error line for bad input.</summary>
public sealed class NiftiInfoCommandTests : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    private static (int Exit, string Out, string Err) Run(params string[] args)
    {
        var (o, e) = (new StringWriter(), new StringWriter());
        int exit = Program.Run(args, o, e);
        return (exit, o.ToString(), e.ToString());
    }

    private (string Path, Affine Affine) WriteSample()
    {
        var affine = Affine.FromAxes(AxisCodes.Parse("RIP"), 0.02, 0.02, 0.05, 9, 7, 5, (1, 2, 3));
        var vol = NiftiPhantom.Make(9, 7, 5, affine, (i, j, k) => i * 0.5f - j + k * 100);
        var path = _temp.File("sample.nii.gz");
        NiftiFile.Write(path, vol, new NiftiWriteOptions { DataType = NiftiDataType.Int16, Unit = SpatialUnit.Micrometre, Description = "phantom series" });
        return (path, affine);
    }

    [Fact]
    public void TextShowsSizesInMillimetresAndMicrometres()
    {
        var (path, _) = WriteSample();
        var (exit, stdout, stderr) = Run("info", path);
        Assert.Equal(0, exit);
        Assert.Equal("", stderr);
        Assert.Contains("9 × 7 × 5 voxels", stdout);
        Assert.Contains("0.02 × 0.02 × 0.05 mm  (20 × 20 × 50 µm)", stdout);
        Assert.Contains("0.18 × 0.14 × 0.25 mm", stdout); // extent
        Assert.Contains("int16, 16 bits per voxel", stdout);
        Assert.Contains("RIP: i (image x) → Right, j (image y) → Inferior, k (section) → Posterior", stdout);
        Assert.Contains("value = stored × ", stdout);
        Assert.Matches(@"Values\s+-[56][.0-9]* to 40[34][.0-9]*\n", stdout); // -6 to 404 within the int16 step (exact values in the JSON test)
        Assert.Contains("from the sform (code 1, scanner anatomical); the qform agrees", stdout);
        Assert.Contains("phantom series", stdout);
        Assert.Contains("µm (shown here in mm)", stdout);
        Assert.Equal(4, stdout.Split('\n').Count(l => l.TrimStart().StartsWith('[')));
    }

    [Fact]
    public void JsonHasTheSameFieldsAsOneObject()
    {
        var (path, affine) = WriteSample();
        var (exit, stdout, _) = Run("info", path, "--json");
        Assert.Equal(0, exit);
        Assert.Single(stdout.TrimEnd('\n').Split('\n'));
        var j = JsonDocument.Parse(stdout).RootElement;
        Assert.Equal(JsonValueKind.Object, j.ValueKind);
        Assert.Equal([9, 7, 5], j.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
        var sizes = j.GetProperty("voxelSizeMm").EnumerateArray().Select(e => e.GetDouble()).ToArray();
        Assert.Equal(0.02, sizes[0], 1e-6);
        Assert.Equal(0.05, sizes[2], 1e-6);
        Assert.Equal("int16", j.GetProperty("dataType").GetString());
        Assert.Equal("RIP", j.GetProperty("axisCodes").GetString());
        NiftiPhantom.AssertAffine(NiftiPython.Matrix(j.GetProperty("affineMm")), affine, 1e-6);
        Assert.Equal("sform", j.GetProperty("affineSource").GetString());
        Assert.Equal(1, j.GetProperty("qformCode").GetInt32());
        Assert.Equal(1, j.GetProperty("sformCode").GetInt32());
        Assert.Equal("phantom series", j.GetProperty("description").GetString());
        Assert.True(j.GetProperty("scaleSlope").GetDouble() > 0);
        // The range of the phantom i*0.5 - j + 100k over 9 × 7 × 5 voxels: min -6 (i=0, j=6, k=0), max 404 (i=8, j=0, k=4).
        Assert.Equal(-6, j.GetProperty("dataMin").GetDouble(), 0.01);
        Assert.Equal(404, j.GetProperty("dataMax").GetDouble(), 0.01);
        Assert.Equal("µm", j.GetProperty("headerUnit").GetString());
    }

    [Fact]
    public void JsonForNibabelsAnatomicalMatchesNibabel()
    {
        // Values read with nibabel 5.0.0 (Debian python3-nibabel) on 2026-12-02: shape (33, 41, 25),
        // zooms (2, 2, 2), aff2axcodes ('L', 'A', 'S'), data min -610, max 30393, descrip b'spm - 3D normalized'.
        const string file = "/usr/lib/python3/dist-packages/nibabel/tests/data/anatomical.nii";
        if (!File.Exists(file)) Assert.Fail($"{file} is missing: install the Debian package python3-nibabel");
        var (exit, stdout, _) = Run("info", file, "--json");
        Assert.Equal(0, exit);
        var j = JsonDocument.Parse(stdout).RootElement;
        Assert.Equal([33, 41, 25], j.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
        Assert.Equal([2.0, 2.0, 2.0], j.GetProperty("voxelSizeMm").EnumerateArray().Select(e => e.GetDouble()));
        Assert.Equal("LAS", j.GetProperty("axisCodes").GetString());
        Assert.Equal(-610, j.GetProperty("dataMin").GetDouble());
        Assert.Equal(30393, j.GetProperty("dataMax").GetDouble());
        Assert.True(j.GetProperty("bigEndian").GetBoolean());
        Assert.Equal("spm - 3D normalized", j.GetProperty("description").GetString());
    }

    [Theory]
    [InlineData("absent.nii", false, "does not exist")]
    [InlineData("junk.nii.gz", true, "not a NIfTI-1 file")]
    public void BadInputIsOneLineOnStandardErrorAndExitOne(string name, bool create, string says)
    {
        var path = _temp.File(name);
        if (create) File.WriteAllText(path, "no volume here");
        foreach (var args in new[] { new[] { "info", path }, ["info", path, "--json"] })
        {
            var (exit, stdout, stderr) = Run(args);
            Assert.Equal(1, exit);
            Assert.Equal("", stdout);
            var lines = stderr.TrimEnd('\n').Split('\n');
            Assert.Single(lines);
            Assert.StartsWith($"error: {path}: ", lines[0]);
            Assert.Contains(says, lines[0]);
        }
    }
}
