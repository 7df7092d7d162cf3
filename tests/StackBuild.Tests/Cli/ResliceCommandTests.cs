using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Reslice;
using Xunit;

namespace StackBuild.Tests;

/// <summary><c>stackbuild reslice</c> and <c>stackbuild view</c> as a user meets them: outputs, JSON and one-line refusals.</summary>
public sealed class ResliceCommandTests : IDisposable
{
    private readonly string _folder = Directory.CreateTempSubdirectory("stackbuild-reslice-cli-").FullName;
    private readonly string _volumePath;
    private readonly Imaging.Volume _volume = ResliceTestSupport.Phantom(30, 24, 10);

    public ResliceCommandTests() => _volumePath = ResliceTestSupport.WriteNifti(_volume, _folder);

    public void Dispose() => Directory.Delete(_folder, recursive: true);

    [Fact]
    public void SectionPlaneIsWrittenWithTheGivenWindow()
    {
        var png = Path.Combine(_folder, "section.png");
        var (exit, stdout, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, "--offset", "-0.1", "--window", "0,255", "-o", png);
        Assert.True(exit == 0, stderr);
        Assert.Contains("section.png", stdout);
        using var image = Image.Load<L8>(png);
        Assert.Equal((30, 24), (image.Width, image.Height));
        // Offset −0.1 mm from the middle section (index 5) with 0.05 mm sections is section 3; window 0–255 keeps 8-bit values.
        for (int y = 0; y < 24; y++)
        for (int x = 0; x < 30; x++)
            Assert.Equal((byte)_volume[x, y, 3], image[x, y].PackedValue);
        Assert.Empty(Directory.GetFiles(_folder, "*.part"));
    }

    [Fact]
    public void SixteenBitOutputSpreadsTheWindowOverTheFullRange()
    {
        var png = Path.Combine(_folder, "plane16.png");
        var (exit, _, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, "--bits", "16", "--window", "0,255", "--nearest", "-o", png);
        Assert.True(exit == 0, stderr);
        using var image = Image.Load<L16>(png);
        for (int y = 0; y < image.Height; y++)
        for (int x = 0; x < image.Width; x++)
            Assert.Equal((ushort)(_volume[x, y, 5] * 257), image[x, y].PackedValue); // 65535 / 255 = 257
    }

    [Fact]
    public void JsonGivesThePlaneAndItsCornersInVoxelsAndMm()
    {
        var png = Path.Combine(_folder, "oblique.png");
        var (exit, stdout, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, "--plane", "jk", "--tilt", "20,-15", "--offset", "0.05",
            "--size", "64x48", "--pixel", "0.01", "--json", "-o", png);
        Assert.True(exit == 0, stderr);
        var json = JsonDocument.Parse(stdout).RootElement;
        var plane = json.GetProperty("plane");
        Assert.Equal("jk", plane.GetProperty("orientation").GetString());
        Assert.Equal(20, plane.GetProperty("tilt_about_horizontal_deg").GetDouble());
        Assert.Equal(-15, plane.GetProperty("tilt_about_vertical_deg").GetDouble());
        Assert.Equal((64, 48), (plane.GetProperty("width").GetInt32(), plane.GetProperty("height").GetInt32()));
        var corners = plane.GetProperty("corners").EnumerateArray().ToArray();
        Assert.Equal(4, corners.Length);
        // Each corner's voxel position, taken through the volume's affine, is its mm position.
        foreach (var c in corners)
        {
            var v = c.GetProperty("voxel").EnumerateArray().Select(e => e.GetDouble()).ToArray();
            var mm = c.GetProperty("mm").EnumerateArray().Select(e => e.GetDouble()).ToArray();
            var (x, y, z) = _volume.Affine.Apply(v[0], v[1], v[2]);
            Assert.Equal(mm[0], x, 6);
            Assert.Equal(mm[1], y, 6);
            Assert.Equal(mm[2], z, 6);
        }
        // Opposite corners are (w−1, h−1) pixels of 0.01 mm apart.
        var tl = corners[0].GetProperty("mm").EnumerateArray().Select(e => e.GetDouble()).ToArray();
        var br = corners[2].GetProperty("mm").EnumerateArray().Select(e => e.GetDouble()).ToArray();
        double diagonal = Math.Sqrt(tl.Zip(br, (a, b) => (a - b) * (a - b)).Sum());
        Assert.Equal(Math.Sqrt(63 * 63 + 47 * 47) * 0.01, diagonal, 6);
        var window = IntensityWindow.Robust(_volume);
        Assert.Equal(window.Low, json.GetProperty("window").GetProperty("low").GetDouble());
        using var image = Image.Load<L8>(png);
        Assert.Equal((64, 48), (image.Width, image.Height));
    }

    [Theory]
    [InlineData("--tilt", "abc", "--tilt", 2)]
    [InlineData("--tilt", "95,0", "between", 1)]
    [InlineData("--tilt", "10", "--tilt", 2)]
    [InlineData("--plane", "diagonal", "not a plane orientation", 1)]
    [InlineData("--bits", "12", "--bits", 1)]
    [InlineData("--window", "200,100", "above its lower limit", 1)]
    [InlineData("--window", "5", "LOW,HIGH", 1)]
    [InlineData("--size", "0", "output size", 1)]
    [InlineData("--size", "12x", "--size", 2)]
    [InlineData("--pixel", "-1", "pixel size", 1)]
    [InlineData("--size", "9000", "output size", 1)]
    [InlineData("--offset", "abc", "--offset 'abc' is not a number", 2)]
    [InlineData("--pixel", "1mm", "--pixel", 2)]
    [InlineData("--fill", "none", "--fill", 2)]
    public void BadOptionsAreOneLineErrors(string option, string value, string expected, int code)
    {
        var png = Path.Combine(_folder, "bad.png");
        var (exit, _, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, option, value, "-o", png);
        Assert.Equal(code, exit); // README's exit codes: 2 a value that cannot be read (text for a number), 1 a value refused
        Assert.Contains(expected, stderr);
        Assert.Single(stderr.TrimEnd().Split('\n'));
        Assert.False(File.Exists(png));
    }

    [Fact]
    public void MissingInputsAreOneLineErrors()
    {
        var (exit, _, stderr) = ResliceTestSupport.Cli("reslice", Path.Combine(_folder, "absent.nii.gz"), "-o", Path.Combine(_folder, "x.png"));
        Assert.Equal(1, exit);
        Assert.Contains("no such file", stderr);
        (exit, _, stderr) = ResliceTestSupport.Cli("reslice", _volumePath);
        Assert.Equal(2, exit); // a required option left out: a bad command line
        Assert.Contains("--output", stderr);
        (exit, _, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, "-o", Path.Combine(_folder, "no-such-folder", "x.png"));
        Assert.Equal(1, exit);
        Assert.Contains("folder", stderr);
        (exit, _, stderr) = ResliceTestSupport.Cli("view", Path.Combine(_folder, "absent.nii.gz"));
        Assert.Equal(1, exit);
        Assert.Contains("no such file", stderr);
        (exit, _, stderr) = ResliceTestSupport.Cli("view", _volumePath, "--listen", "not-an-address");
        Assert.Equal(1, exit);
        Assert.Contains("--listen", stderr);
        (exit, _, stderr) = ResliceTestSupport.Cli("view", _volumePath, "--port", "70000");
        Assert.Equal(1, exit);
        Assert.Contains("--port", stderr);
    }

    [Fact]
    public async Task ABusyPortIsAOneLineError()
    {
        await using var busy = await StackBuild.Viewer.ViewerServer.StartAsync(_volume, "busy", System.Net.IPAddress.Loopback, 0);
        var (exit, _, stderr) = ResliceTestSupport.Cli("view", _volumePath, "--port", busy.Url.Port.ToString(System.Globalization.CultureInfo.InvariantCulture));
        Assert.Equal(1, exit);
        Assert.Contains("cannot listen", stderr);
        Assert.Single(stderr.TrimEnd().Split('\n'));
    }

    [Fact]
    public void NegativeNumbersAreTakenAsValues()
    {
        var png = Path.Combine(_folder, "negative.png");
        var (exit, _, stderr) = ResliceTestSupport.Cli("reslice", _volumePath, "--tilt", "-10,-20", "--offset", "-0.05", "-o", png);
        Assert.True(exit == 0, stderr);
        Assert.True(File.Exists(png));
    }
}
