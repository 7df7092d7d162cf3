using System.Globalization;
using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Nifti;
using StackBuild.Reslice;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// <c>stackbuild reslice --overlay</c>: a colour figure whose pixels are the grey plane with the overlay mixed over it
/// where SciPy's map_coordinates puts the overlay (through its own affine), with edge letters and a scale bar.
/// </summary>
public sealed class ResliceFigureTests(NiftiTempFolder temp) : IClassFixture<NiftiTempFolder>
{
    private readonly string _folder = temp.Path;

    [Fact]
    public void AnOverlayOnAnotherGridIsMixedWhereScipyPutsIt()
    {
        var main = ResliceScipyTests.SmoothRandomVolume(37, 29, 23, seed: 7);
        var stain = ResliceScipyTests.SmoothRandomVolume(30, 26, 20, seed: 9);
        // Another grid: the stain's voxels 1.15 times larger and the whole grid shifted.
        var r = stain.Affine.ToRows();
        stain.Affine = Affine.FromRows(
            [r[0][0] * 1.15, r[0][1] * 1.15, r[0][2] * 1.15, r[0][3] + 1.1],
            [r[1][0] * 1.15, r[1][1] * 1.15, r[1][2] * 1.15, r[1][3] - 0.7],
            [r[2][0] * 1.15, r[2][1] * 1.15, r[2][2] * 1.15, r[2][3] + 0.4]);
        string mainPath = Path.Combine(_folder, "main.nii.gz"), stainPath = Path.Combine(_folder, "stain.nii.gz"), png = Path.Combine(_folder, "figure.png");
        NiftiFile.Write(mainPath, main);
        NiftiFile.Write(stainPath, stain);
        var (exit, stdout, stderr) = ResliceTestSupport.Cli("reslice", mainPath, "--plane", "jk", "--tilt", "10,20", "--pixel", "0.35",
            "--overlay", stainPath, "--opacity", "0.5", "--json", "-o", png);
        Assert.True(exit == 0, stderr);
        var json = JsonDocument.Parse(stdout).RootElement;
        var g = json.GetProperty("plane");
        Vector3D V(string name) { var a = g.GetProperty(name).EnumerateArray().Select(e => e.GetDouble()).ToArray(); return new Vector3D(a[0], a[1], a[2]); }
        var plane = new ReslicePlane(V("centre_mm"), V("right_direction"), V("down_direction"), g.GetProperty("width").GetInt32(), g.GetProperty("height").GetInt32(), g.GetProperty("pixel_size_mm").GetDouble());
        var figure = json.GetProperty("figure");
        int zoom = figure.GetProperty("zoom").GetInt32(), margin = figure.GetProperty("margin").GetInt32();
        var window = json.GetProperty("window");
        var stainWindow = figure.GetProperty("overlays")[0].GetProperty("window");
        Assert.False(figure.GetProperty("overlays")[0].GetProperty("labels").GetBoolean()); // float values: an intensity overlay

        var (grey, _) = ResliceScipyTests.RunScipy(main, plane, fill: 0f, nearest: false);
        var (over, _) = ResliceScipyTests.RunScipy(stain, plane, fill: -1e9f, nearest: false);
        // The first intensity overlay's colour: hue 32°, saturation 0.9, lightness 0.55 (HSL as CSS Color Level 3 defines it).
        var colour = Hsl(32, 0.9, 0.55);
        using var image = Image.Load<Rgb24>(png);
        Assert.Equal(figure.GetProperty("width").GetInt32(), image.Width);
        Assert.Equal(plane.Width * zoom + 2 * margin, image.Width);
        int worst = 0, covered = 0;
        for (int y = 0; y < plane.Height; y++)
        for (int x = 0; x < plane.Width; x++)
        {
            int p = y * plane.Width + x;
            double gray = Gray8(grey[p], window.GetProperty("low").GetDouble(), window.GetProperty("high").GetDouble());
            double a = over[p] < -1e8f ? 0 : Gray8(over[p], stainWindow.GetProperty("low").GetDouble(), stainWindow.GetProperty("high").GetDouble()) / 255.0 * 0.5;
            if (a > 0.05) covered++;
            // Source-over mixing (common practice: the Porter–Duff "over" operator with an opaque backdrop).
            double[] expected = [gray * (1 - a) + colour[0] * a, gray * (1 - a) + colour[1] * a, gray * (1 - a) + colour[2] * a];
            var shown = image[margin + x * zoom + zoom / 2, margin + y * zoom + zoom / 2];
            worst = Math.Max(worst, (int)Math.Max(Math.Abs(shown.R - expected[0]), Math.Max(Math.Abs(shown.G - expected[1]), Math.Abs(shown.B - expected[2]))) );
        }
        Assert.True(worst <= 2, $"the figure differs from the grey plane and overlay SciPy samples by {worst} levels"); // rounding of two 8-bit steps
        Assert.InRange(covered, plane.Width * plane.Height / 10, plane.Width * plane.Height); // the overlay really covers part of the plane

        // Edge letters stand in the margins; the scale bar under the plane is a 1-2-5 length near a fifth of its width.
        int ink = 0;
        for (int y = 0; y < margin; y++) for (int x = 0; x < image.Width; x++) if (image[x, y].R > 200) ink++;
        Assert.True(ink > 10, "no letter above the plane");
        int barY = margin + plane.Height * zoom + margin + figure.GetProperty("footer").GetInt32() / 2 - 1, bar = 0;
        while (image[margin + bar, barY].R > 200) bar++;
        double mmPerPixel = plane.PixelSizeMm / zoom, target = plane.Width * zoom / 5.0 * mmPerPixel;
        double power = Math.Pow(10, Math.Floor(Math.Log10(target)));
        double length = new[] { 5 * power, 2 * power, power }.First(l => l <= target);
        Assert.Equal((int)Math.Round(length / mmPerPixel), bar);
    }

    [Theory]
    [InlineData("--opacity", "1.5", "--opacity")]
    [InlineData("--label-style", "dots", "--label-style")]
    [InlineData("--bits", "16", "8-bit colour")]
    public void BadFigureOptionsAreOneLineErrors(string option, string value, string expected)
    {
        var path = ResliceTestSupport.WriteNifti(ResliceTestSupport.Phantom(20, 16, 6), _folder);
        var png = Path.Combine(_folder, "x.png");
        var (exit, _, stderr) = ResliceTestSupport.Cli("reslice", path, "--figure", option, value, "-o", png);
        Assert.Equal(1, exit);
        Assert.Contains(expected, stderr);
        Assert.Single(stderr.TrimEnd().Split('\n'));
        Assert.False(File.Exists(png));
    }

    private static int Gray8(double v, double low, double high) =>
        (int)Math.Clamp(Math.Round((v - low) * (255 / (high - low)), MidpointRounding.AwayFromZero), 0, 255);

    private static double[] Hsl(double hue, double s, double l)
    {
        // CSS Color Module Level 3, section 4.2.4: HSL to RGB.
        double m2 = l <= 0.5 ? l * (s + 1) : l + s - l * s, m1 = l * 2 - m2;
        double Hue(double h)
        {
            if (h < 0) h += 1;
            if (h > 1) h -= 1;
            if (h * 6 < 1) return m1 + (m2 - m1) * h * 6;
            if (h * 2 < 1) return m2;
            if (h * 3 < 2) return m1 + (m2 - m1) * (2.0 / 3 - h) * 6;
            return m1;
        }
        double hh = hue / 360;
        return [Math.Round(Hue(hh + 1.0 / 3) * 255), Math.Round(Hue(hh) * 255), Math.Round(Hue(hh - 1.0 / 3) * 255)];
    }
}
