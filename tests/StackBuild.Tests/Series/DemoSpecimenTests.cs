using System.Globalization;
using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Demo;
using StackBuild.Imaging;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The default demo specimen, made and written once for the tests that only read it.</summary>
public sealed class DemoSpecimenFixture : IDisposable
{
    public DemoSpecimen Specimen { get; }
    public string Folder { get; }

    public DemoSpecimenFixture()
    {
        Specimen = DemoSpecimenMaker.Make(new DemoOptions());
        Folder = Path.Combine(Path.GetTempPath(), $"stackbuild-demo-{Guid.NewGuid():N}");
        DemoSpecimenMaker.WriteFiles(Specimen, Folder);
    }

    public void Dispose()
    {
        try { Directory.Delete(Folder, recursive: true); } catch (IOException) { }
    }
}

public class DemoSpecimenTests(DemoSpecimenFixture fixture) : IClassFixture<DemoSpecimenFixture>
{
    private DemoSpecimen Specimen => fixture.Specimen;

    private IEnumerable<DemoSection> Intact => Specimen.Sections.Where(s => !s.Lost && !s.Torn && !s.Excluded);

    [Fact]
    public void SameSeedGivesIdenticalFilesAndAnotherSeedDoesNot()
    {
        var options = new DemoOptions { Sections = 10, Size = 64 };
        var a = TempFolder();
        var b = TempFolder();
        var c = TempFolder();
        try
        {
            DemoSpecimenMaker.WriteFiles(DemoSpecimenMaker.Make(options), a);
            DemoSpecimenMaker.WriteFiles(DemoSpecimenMaker.Make(options), b);
            DemoSpecimenMaker.WriteFiles(DemoSpecimenMaker.Make(options with { Seed = 8 }), c);
            var namesA = Directory.GetFiles(a).Select(Path.GetFileName).Order(StringComparer.Ordinal).ToArray();
            var namesB = Directory.GetFiles(b).Select(Path.GetFileName).Order(StringComparer.Ordinal).ToArray();
            Assert.Equal(namesA, namesB);
            foreach (var name in namesA)
                Assert.True(File.ReadAllBytes(Path.Combine(a, name!)).SequenceEqual(File.ReadAllBytes(Path.Combine(b, name!))), $"{name} differs between two runs with the same seed");

            var common = namesA.Intersect(Directory.GetFiles(c).Select(Path.GetFileName)).Where(n => n!.EndsWith(".png", StringComparison.Ordinal)).ToArray();
            Assert.NotEmpty(common);
            Assert.All(common, name => Assert.False(
                File.ReadAllBytes(Path.Combine(a, name!)).SequenceEqual(File.ReadAllBytes(Path.Combine(c, name!))), $"{name} is the same for seeds 7 and 8"));
        }
        finally
        {
            foreach (var d in new[] { a, b, c }) if (Directory.Exists(d)) Directory.Delete(d, true);
        }
    }

    [Fact]
    public void TruthIsTheSameForTheSameSeed()
    {
        var options = new DemoOptions { Sections = 6, Size = 48 };
        var first = DemoSpecimenMaker.Make(options).Truth.Voxels;
        var second = DemoSpecimenMaker.Make(options).Truth.Voxels;
        var other = DemoSpecimenMaker.Make(options with { Seed = 99 }).Truth.Voxels;
        Assert.True(first.AsSpan().SequenceEqual(second));
        Assert.False(first.AsSpan().SequenceEqual(other));
    }

    [Fact]
    public void MishapsAreThereInTheRightNumbers()
    {
        var sections = Specimen.Sections;
        Assert.Equal(60, sections.Count);
        Assert.Equal(Enumerable.Range(1, 60), sections.Select(s => s.Number));
        Assert.False(sections[0].Lost);
        Assert.False(sections[^1].Lost);

        // Runs of lost sections: 2 or 3 single ones and one run of two.
        var runs = new List<int>();
        for (int k = 0; k < sections.Count; k++)
        {
            if (!sections[k].Lost) continue;
            int length = 0;
            while (k < sections.Count && sections[k].Lost) { length++; k++; }
            runs.Add(length);
        }
        Assert.Equal(1, runs.Count(r => r == 2));
        Assert.InRange(runs.Count(r => r == 1), 2, 3);
        Assert.DoesNotContain(runs, r => r > 2);

        Assert.Single(sections, s => s.Torn);
        Assert.Single(sections, s => s.Excluded);
        Assert.DoesNotContain(sections, s => s.Lost && (s.Torn || s.Excluded || s.Mirrored));

        var present = sections.Where(s => !s.Lost).ToList();
        double mirroredShare = present.Count(s => s.Mirrored) / (double)present.Count;
        Assert.InRange(mirroredShare, 0.07, 0.13); // about one in ten, as issue 2 asks

        for (int k = 0; k < sections.Count; k++)
        {
            var s = sections[k];
            Assert.Equal(s.Lost, s.FileName is null);
            Assert.Equal(s.Lost, Specimen.Images[k] is null);
            if (!s.Lost)
            {
                Assert.Equal(s.Mirrored, s.PlaneToImage.IsMirrored);
                Assert.Equal(1.0, Math.Abs(s.PlaneToImage.Determinant), 9); // rigid: no scaling
                Assert.Equal($"section_{s.Number:000}.png", s.FileName);
            }
        }
        // Angles are spread over the full turn, not all near zero.
        var angles = present.Select(s => s.PlaneToImage.RotationDegrees).ToList();
        Assert.True(angles.Max() - angles.Min() > 270, "placements should use the full range of angles");
    }

    [Fact]
    public void TruthIsStainDensityOnTheSeriesGrid()
    {
        var truth = Specimen.Truth;
        Assert.Equal((256, 205, 60), (truth.Nx, truth.Ny, truth.Nz));
        Assert.Equal("RIP", truth.Affine.AxisCodes.Code);
        var sizes = truth.Affine.VoxelSizes;
        Assert.Equal(0.020, sizes.I, 12);
        Assert.Equal(0.020, sizes.J, 12);
        Assert.Equal(0.050, sizes.K, 12);
        Assert.All(truth.Voxels, v => Assert.InRange(v, 0f, 1f));
        for (int k = 0; k < truth.Nz; k++)
        {
            var plane = truth.Plane(k);
            int tissue = 0;
            foreach (var v in plane) if (v > 0.05f) tissue++;
            Assert.InRange(tissue / (double)plane.Length, 0.2, 0.7);
        }
    }

    [Fact]
    public void ImagesAreTheTruthSeenThroughPlaneToImage()
    {
        var truth = Specimen.Truth;
        int w = truth.Nx, h = truth.Ny;
        foreach (var s in Intact)
        {
            var plane = new GrayImage(w, h, truth.Plane(s.Number - 1).ToArray());
            var written = ReadPng(Path.Combine(fixture.Folder, s.FileName!));
            Assert.Equal(Specimen.Images[s.Number - 1]!.Pixels, written.Pixels);

            var back = s.PlaneToImage.Inverse();
            var expected = new float[w * h];
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                var (qx, qy) = back.Apply(x, y);
                float density = plane.SampleBilinear(qx, qy);
                expected[y * w + x] = (float)(255 * (s.Offset - s.Gain * density));
                // Tissue stays inside the canvas: the image's outer frame is bare slide.
                if (x == 0 || y == 0 || x == w - 1 || y == h - 1) Assert.Equal(0f, density);
            }
            Assert.True(Correlation(expected, written.Pixels) > 0.98, $"section {s.Number}: image does not match the truth");
            double residual = StandardDeviation(expected.Zip(written.Pixels, (e, v) => (double)v - e));
            // Noise of 2 gray levels plus rounding (1/√12): about 2.02.
            Assert.InRange(residual, 1.7, 2.4);
        }
    }

    [Fact]
    public void PlaneToImageMeansTheSameToScipy()
    {
        // External check: scipy.ndimage.map_coordinates (Debian python3-scipy) and skimage.io (python3-skimage)
        // read truth.json's convention independently of StackBuild's own sampler.
        var picks = Intact.Where(s => s.Mirrored).Take(2).Concat(Intact.Where(s => !s.Mirrored).Take(2)).ToList();
        Assert.Equal(4, picks.Count);
        var planes = TempFolder();
        Directory.CreateDirectory(planes);
        try
        {
            foreach (var s in picks)
            {
                var bytes = System.Runtime.InteropServices.MemoryMarshal.AsBytes(Specimen.Truth.Plane(s.Number - 1)).ToArray();
                Assert.True(BitConverter.IsLittleEndian);
                File.WriteAllBytes(Path.Combine(planes, $"plane_{s.Number:000}.f32"), bytes);
            }
            var script = Path.Combine(AppContext.BaseDirectory, "tools", "demo_check_transform.py");
            var (code, output, error) = NiftiPython.Process(NiftiPython.Python, [script, fixture.Folder, planes, .. picks.Select(s => s.Number.ToString(CultureInfo.InvariantCulture))]);
            Assert.True(code == 0, $"the scipy check did not run (are python3-scipy and python3-skimage installed?): {error}");
            var results = output.Split('\n', StringSplitOptions.RemoveEmptyEntries).Select(l => JsonDocument.Parse(l).RootElement).ToList();
            Assert.Equal(picks.Count, results.Count);
            foreach (var r in results)
            {
                Assert.True(r.GetProperty("correlation").GetDouble() > 0.98, $"scipy disagrees for section {r.GetProperty("number")}: {r}");
                Assert.InRange(r.GetProperty("residual_sd").GetDouble(), 1.7, 2.4);
            }
        }
        finally
        {
            Directory.Delete(planes, true);
        }
    }

    [Fact]
    public void MarkingTrackIsOnTheRightOnly()
    {
        var truth = Specimen.Truth;
        int w = truth.Nx, h = truth.Ny;
        double centre = (w - 1) / 2.0;
        var mirror = new float[w * h];
        for (int k = 0; k < truth.Nz; k++)
        {
            var plane = truth.Plane(k).ToArray();
            int inkLeft = 0, inkRight = 0;
            for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++)
            {
                mirror[y * w + x] = plane[y * w + (w - 1 - x)];
                if (plane[y * w + x] >= 0.96f) { if (x < centre) inkLeft++; else inkRight++; }
            }
            Assert.Equal(0, inkLeft);
            Assert.True(inkRight >= 20, $"plane {k}: the marking ink is missing ({inkRight} px)");
            // Roughly bilateral, but its mirror image is clearly a different picture.
            double mirrored = Correlation(plane, mirror);
            Assert.InRange(mirrored, 0.75, 0.97);
        }
    }

    [Fact]
    public void VesselRunsThroughEverySectionAndMovesSmoothly()
    {
        var phantom = new DemoPhantom(Specimen.Options);
        var truth = Specimen.Truth;
        var centres = Enumerable.Range(0, truth.Nz).Select(k => phantom.TubeCentre(k)).ToList();
        double path = 0;
        for (int k = 0; k < truth.Nz; k++)
        {
            var plane = new GrayImage(truth.Nx, truth.Ny, truth.Plane(k).ToArray());
            var (cx, cy) = centres[k];
            Assert.True(plane.SampleBilinear(cx, cy) < 0.35, $"plane {k}: no pale lumen at the vessel centre");
            double wall = 0;
            int n = 0;
            double r = (phantom.TubeLumenRadiusPx + phantom.TubeOuterRadiusPx) / 2;
            for (int a = 0; a < 16; a++, n++)
                wall += plane.SampleBilinear(cx + r * Math.Cos(a * Math.PI / 8), cy + r * Math.Sin(a * Math.PI / 8));
            Assert.True(wall / n > 0.6, $"plane {k}: no dark wall around the vessel (mean {wall / n:0.00})");
            if (k > 0)
            {
                double step = Math.Sqrt(Math.Pow(cx - centres[k - 1].X, 2) + Math.Pow(cy - centres[k - 1].Y, 2));
                Assert.True(step < 2.0, $"vessel jumps {step:0.0} px between planes {k - 1} and {k}");
                path += step;
            }
        }
        Assert.True(path > 20, $"the vessel should curve through the block, not stand still (path {path:0.0} px)");
    }

    [Fact]
    public void ManifestIsInTheSeriesFormat()
    {
        var lines = File.ReadAllLines(Path.Combine(fixture.Folder, "manifest.csv"));
        Assert.StartsWith("#", lines[0]);
        Assert.Contains("#! pixel_size_um = 20", lines);
        Assert.Contains("#! spacing_um = 50", lines);
        var table = lines.Where(l => !l.StartsWith('#')).ToList();
        Assert.Equal("section,file,mirrored,exclude,damaged,note", table[0]);
        Assert.Equal(Specimen.Sections.Count, table.Count - 1);
        Assert.DoesNotContain(table, l => l.Contains('"'));
        foreach (var (row, s) in table.Skip(1).Zip(Specimen.Sections))
        {
            var cells = row.Split(',');
            Assert.Equal(6, cells.Length);
            Assert.Equal(s.Number.ToString(CultureInfo.InvariantCulture), cells[0]);
            Assert.Equal("", cells[2]); // mirrored: unknown, registration must find it
            if (s.Lost)
            {
                Assert.Equal($"{s.Number},,,,,lost during cutting", row);
                continue;
            }
            Assert.Equal($"section_{s.Number:000}.png", cells[1]);
            Assert.Equal(s.Excluded ? "yes" : "", cells[3]);
            Assert.Equal(s.Torn ? "yes" : "", cells[4]);
            Assert.Equal(s.Torn || s.Excluded, cells[5].Length > 0);
            var info = Image.Identify(Path.Combine(fixture.Folder, cells[1]));
            Assert.NotNull(info);
            Assert.Equal((256, 205, 8), (info.Width, info.Height, info.PixelType.BitsPerPixel));
        }
        var pngs = Directory.GetFiles(fixture.Folder, "*.png").Select(Path.GetFileName).Order(StringComparer.Ordinal);
        Assert.Equal(Specimen.Sections.Where(s => !s.Lost).Select(s => s.FileName), pngs);
    }

    [Fact]
    public void TruthJsonRecordsEverySection()
    {
        using var doc = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(fixture.Folder, "truth.json")));
        var root = doc.RootElement;
        Assert.Equal("stackbuild-demo-truth", root.GetProperty("format").GetString());
        var options = root.GetProperty("options");
        Assert.Equal(7, options.GetProperty("seed").GetInt32());
        Assert.Equal(20, options.GetProperty("pixel_size_um").GetDouble());
        Assert.Equal(50, options.GetProperty("spacing_um").GetDouble());
        var volume = root.GetProperty("truth_volume");
        Assert.Equal("RIP", volume.GetProperty("axis_codes").GetString());
        Assert.Equal([256, 205, 60], volume.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
        var sections = root.GetProperty("sections").EnumerateArray().ToList();
        Assert.Equal(Specimen.Sections.Count, sections.Count);
        foreach (var (json, s) in sections.Zip(Specimen.Sections))
        {
            Assert.Equal(s.Number, json.GetProperty("number").GetInt32());
            Assert.Equal(s.FileName, json.GetProperty("file").GetString());
            Assert.Equal(s.Lost, json.GetProperty("lost").GetBoolean());
            Assert.Equal(s.Mirrored, json.GetProperty("mirrored").GetBoolean());
            Assert.Equal(s.Torn, json.GetProperty("torn").GetBoolean());
            Assert.Equal(s.Excluded, json.GetProperty("excluded").GetBoolean());
            Assert.Equal(s.Gain, json.GetProperty("gain").GetDouble());
            Assert.Equal(s.Offset, json.GetProperty("offset").GetDouble());
            var rows = json.GetProperty("plane_to_image").EnumerateArray()
                .Select(r => r.EnumerateArray().Select(v => v.GetDouble()).ToArray()).ToArray();
            Assert.Equal(3, rows.Length);
            Assert.Equal([0.0, 0.0, 1.0], rows[2]);
            Assert.Equal(s.PlaneToImage, Geometry.Transform2D.FromRows(rows)); // exact: JSON doubles round-trip
        }
    }

    [Fact]
    public void OptionsOutsideTheLimitsAreRefused()
    {
        Assert.Throws<ArgumentOutOfRangeException>(() => DemoSpecimenMaker.Make(new DemoOptions { Sections = 2 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => DemoSpecimenMaker.Make(new DemoOptions { Size = 31 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => DemoSpecimenMaker.Make(new DemoOptions { PixelSizeUm = 0 }));
    }

    [Fact]
    public void SmallSeriesStillFitTheCanvas()
    {
        foreach (var options in new[] { new DemoOptions { Sections = 3, Size = 32 }, new DemoOptions { Sections = 9, Size = 100, Seed = 3 } })
        {
            var specimen = DemoSpecimenMaker.Make(options);
            Assert.Equal(options.Sections, specimen.Sections.Count);
            Assert.Contains(specimen.Sections, s => !s.Lost);
            foreach (var (s, image) in specimen.Sections.Zip(specimen.Images))
            {
                if (image is null) continue;
                var plane = new GrayImage(options.Width, options.Height, specimen.Truth.Plane(s.Number - 1).ToArray());
                var back = s.PlaneToImage.Inverse();
                for (int x = 0; x < image.Width; x++)
                {
                    Assert.Equal(0f, plane.SampleBilinear(back.Apply(x, 0).X, back.Apply(x, 0).Y));
                    Assert.Equal(0f, plane.SampleBilinear(back.Apply(x, image.Height - 1).X, back.Apply(x, image.Height - 1).Y));
                }
            }
        }
    }

    internal static string TempFolder() => Path.Combine(Path.GetTempPath(), $"stackbuild-demo-test-{Guid.NewGuid():N}");

    private static GrayImage ReadPng(string path)
    {
        using var png = Image.Load<L8>(path);
        var bytes = new byte[png.Width * png.Height];
        png.CopyPixelDataTo(bytes);
        return new GrayImage(png.Width, png.Height, bytes.Select(b => (float)b).ToArray());
    }

    private static double Correlation(IReadOnlyList<float> a, IReadOnlyList<float> b)
    {
        double ma = a.Average(v => (double)v), mb = b.Average(v => (double)v), ab = 0, aa = 0, bb = 0;
        for (int i = 0; i < a.Count; i++)
        {
            double da = a[i] - ma, db = b[i] - mb;
            ab += da * db; aa += da * da; bb += db * db;
        }
        return ab / Math.Sqrt(aa * bb);
    }

    private static double StandardDeviation(IEnumerable<double> values)
    {
        var list = values.ToList();
        double mean = list.Average();
        return Math.Sqrt(list.Sum(v => (v - mean) * (v - mean)) / list.Count);
    }
}
