using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Demo;

/// <summary>
/// Makes the synthetic demo specimen (a procedural tissue block, no real data), cuts it into sections, mounts
/// and scans them, and writes the series folder: one 8-bit gray PNG per surviving section, manifest.csv and
/// truth.json (the truth volume itself, truth.nii.gz, is written by the caller with the NIfTI writer).
/// </summary>
public static class DemoSpecimenMaker
{
    /// <summary>Standard deviation of the scanner noise added to every image, in 8-bit gray levels.</summary>
    public const double ScanNoiseGrayLevels = 2.0;

    public const string ManifestFileName = "manifest.csv";
    public const string TruthFileName = "truth.json";
    public const string TruthVolumeFileName = "truth.nii.gz";

    // Purposes that key the random streams (with the seed and the section number).
    private const int PurposeMounting = 3, PurposeDamage = 4, PurposeScan = 5, PurposeDamageNoise = 6;

    /// <summary>
    /// Builds the specimen. Pure and deterministic: the same options give the same truth and the same images,
    /// bit for bit, whatever the number of threads (each section draws from its own stream keyed by the seed
    /// and its number). Throws <see cref="ArgumentOutOfRangeException"/> for options outside
    /// <see cref="DemoOptions"/>' limits.
    /// </summary>
    public static DemoSpecimen Make(DemoOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        int w = options.Width, h = options.Height, n = options.Sections;
        var phantom = new DemoPhantom(options);
        double pixelMm = options.PixelSizeUm / 1000, spacingMm = options.SpacingUm / 1000;
        var truth = new Volume(w, h, n, Affine.FromAxes(AxisCodes.Default, pixelMm, pixelMm, spacingMm, w, h, n));
        Parallel.For(0, n, k => phantom.Render(k, truth.Plane(k)));

        var layout = DemoLayout.Choose(options.Seed, n);
        int digits = Math.Max(3, n.ToString(System.Globalization.CultureInfo.InvariantCulture).Length);
        var sections = new DemoSection[n];
        var images = new GrayImage?[n];
        Parallel.For(0, n, k =>
        {
            int number = k + 1;
            if (layout.Lost[k])
            {
                sections[k] = new DemoSection(number, null, true, false, false, false, Transform2D.Identity, 0, 0);
                return;
            }
            var plane = new GrayImage(w, h, truth.Plane(k).ToArray());
            var damage = new DemoRandom(options.Seed, PurposeDamage, number);
            if (layout.Torn[k]) plane = DemoMounting.Tear(plane, damage, DemoRandom.Key(options.Seed, PurposeDamageNoise, number));
            else if (layout.Excluded[k]) plane = DemoMounting.FoldAndBubble(plane, damage);

            var mounting = new DemoRandom(options.Seed, PurposeMounting, number);
            // Rounded so that truth.json records exactly the values that made the image.
            double gain = Math.Round(mounting.Uniform(0.6, 0.75), 4);
            double offset = Math.Round(mounting.Uniform(0.88, 0.95), 4);
            var planeToImage = DemoMounting.Placement(plane, layout.Mirrored[k], mounting);
            images[k] = DemoMounting.Scan(plane, planeToImage, gain, offset, ScanNoiseGrayLevels,
                new DemoRandom(options.Seed, PurposeScan, number));
            string file = $"section_{number.ToString(System.Globalization.CultureInfo.InvariantCulture).PadLeft(digits, '0')}.png";
            sections[k] = new DemoSection(number, file, false, layout.Mirrored[k], layout.Torn[k], layout.Excluded[k], planeToImage, gain, offset);
        });
        return new DemoSpecimen(options, truth, sections, images);
    }

    /// <summary>
    /// Writes the section images, manifest.csv and truth.json into <paramref name="outDir"/> (created if
    /// needed), each through <see cref="IO.AtomicFile"/>. Section images named by an earlier demo in the same
    /// folder (listed in its truth.json) that this specimen does not have are removed; nothing else is touched.
    /// </summary>
    public static void WriteFiles(DemoSpecimen specimen, string outDir)
    {
        ArgumentNullException.ThrowIfNull(specimen);
        Directory.CreateDirectory(outDir);
        var earlier = DemoFiles.EarlierSectionFiles(outDir);
        foreach (var (section, image) in specimen.Sections.Zip(specimen.Images))
        {
            if (section.FileName is null || image is null) continue;
            var png = DemoFiles.EncodePng(image, specimen.Options.PixelSizeUm);
            IO.AtomicFile.WriteAllBytes(Path.Combine(outDir, section.FileName), png);
        }
        IO.AtomicFile.WriteAllText(Path.Combine(outDir, ManifestFileName), DemoFiles.ManifestText(specimen));
        IO.AtomicFile.WriteAllText(Path.Combine(outDir, TruthFileName), DemoFiles.TruthJson(specimen));
        var current = specimen.Sections.Select(s => s.FileName).OfType<string>().ToHashSet(StringComparer.Ordinal);
        foreach (var stale in earlier.Where(f => !current.Contains(f)))
            File.Delete(Path.Combine(outDir, stale));
    }

    /// <summary>True when <paramref name="dir"/> holds a truth.json written by <see cref="WriteFiles"/>.</summary>
    public static bool IsDemoFolder(string dir) => DemoFiles.ReadTruthFormat(Path.Combine(dir, TruthFileName)) == DemoFiles.TruthFormat;
}
