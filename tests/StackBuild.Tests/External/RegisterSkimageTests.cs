using System.Globalization;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Our phase correlation against scikit-image's <c>phase_cross_correlation</c> (Debian python3-skimage, the
/// same published method with upsample_factor = 20) on MRI sections from mricron-data shifted by known
/// sub-pixel amounts. Both must agree within 0.1 px, and both must be near the truth.
/// </summary>
public class RegisterSkimageTests(ITestOutputHelper output)
{
    [Fact]
    public void TranslationAgreesWithScikitImage()
    {
        var volume = RegisterMriTests.Template();
        var rng = new Random(404);
        using var folder = new NiftiTempFolder();
        var pairs = new List<(string Name, GrayImage Fixed, GrayImage Moving, double Dx, double Dy)>();
        for (int s = 0; s < 12; s++)
        {
            int k = 50 + 7 * s;
            var section = RegisterMriTests.Section(volume, k);
            double dx = rng.NextDouble() * 30 - 15, dy = rng.NextDouble() * 30 - 15;
            var moving = RegisterTestImages.Move(section, Transform2D.Translation(dx, dy), section.Width, section.Height);
            // fixed = moving content shifted back by (−dx, −dy): the shift that lays moving on fixed is (−dx, −dy).
            pairs.Add(($"k{k}", section, moving, -dx, -dy));
        }
        var manifest = folder.File("pairs.txt");
        using (var writer = new StreamWriter(manifest))
            foreach (var (name, f, m, _, _) in pairs)
            {
                WriteRaw(folder.File($"{name}-f.raw"), f);
                WriteRaw(folder.File($"{name}-m.raw"), m);
                writer.WriteLine($"{name} {f.Width} {f.Height} {folder.File($"{name}-f.raw")} {folder.File($"{name}-m.raw")}");
            }
        var reference = RunSkimage(manifest);

        double worstAgreement = 0;
        var lowPassErrors = new List<double>();
        foreach (var (name, f, m, dx, dy) in pairs)
        {
            var ours = PhaseCorrelation.Estimate(f, m, new PhaseCorrelationOptions { UpsampleFactor = 20 });
            var (sx, sy) = reference[name];
            double agreement = Math.Max(Math.Abs(ours.Dx - sx), Math.Abs(ours.Dy - sy));
            worstAgreement = Math.Max(worstAgreement, agreement);
            // The registration's variant (Gaussian low-pass on the cross-power) is less disturbed by the bilinear
            // resampling that made the pair; measured here against the truth.
            var lowPassed = PhaseCorrelation.Estimate(f, m, new PhaseCorrelationOptions { LowPass = new RegistrationOptions().LowPass });
            lowPassErrors.Add(Math.Sqrt((lowPassed.Dx - dx) * (lowPassed.Dx - dx) + (lowPassed.Dy - dy) * (lowPassed.Dy - dy)));
            output.WriteLine($"{name}: truth ({dx:F3}, {dy:F3}) ours ({ours.Dx:F3}, {ours.Dy:F3}) scikit-image ({sx:F3}, {sy:F3}) low-passed ({lowPassed.Dx:F3}, {lowPassed.Dy:F3})");
            Assert.True(agreement <= 0.1, $"{name}: ours ({ours.Dx}, {ours.Dy}) vs scikit-image ({sx}, {sy})");
            Assert.True(Math.Abs(sx - dx) <= 0.25 && Math.Abs(sy - dy) <= 0.25, $"{name}: scikit-image far from truth");
            Assert.True(Math.Abs(ours.Dx - dx) <= 0.25 && Math.Abs(ours.Dy - dy) <= 0.25, $"{name}: ours far from truth");
        }
        output.WriteLine($"largest difference from scikit-image: {worstAgreement:F3} px; low-passed median error {RegisterTestImages.Median(lowPassErrors):F3} px");
        Assert.True(RegisterTestImages.Median(lowPassErrors) <= 0.1, $"low-passed median error {RegisterTestImages.Median(lowPassErrors):F3} px");
    }

    private static void WriteRaw(string path, GrayImage image)
    {
        var bytes = new byte[image.Pixels.Length * 4];
        Buffer.BlockCopy(image.Pixels, 0, bytes, 0, bytes.Length);
        if (!BitConverter.IsLittleEndian) throw new PlatformNotSupportedException("The raw exchange files are little-endian.");
        File.WriteAllBytes(path, bytes);
    }

    private static Dictionary<string, (double Dx, double Dy)> RunSkimage(string manifest)
    {
        const string script = "skimage_phase_correlation.py";
        if (!File.Exists(NiftiPython.Python))
            Assert.Fail($"{NiftiPython.Python} is missing: install the Debian packages python3 and python3-skimage (tests/run.sh does this as root)");
        var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, [NiftiPython.Tool(script), manifest, "20"]);
        if (exit == 3) Assert.Fail($"{script}: {stderr.Trim()} (Debian package python3-skimage; tests/run.sh installs it as root)");
        if (exit != 0) Assert.Fail($"{script} failed with exit code {exit}: {stderr.Trim()}");
        return stdout.Split('\n', StringSplitOptions.RemoveEmptyEntries).Select(l => l.Split(' '))
            .ToDictionary(p => p[0], p => (double.Parse(p[1], CultureInfo.InvariantCulture), double.Parse(p[2], CultureInfo.InvariantCulture)));
    }
}
