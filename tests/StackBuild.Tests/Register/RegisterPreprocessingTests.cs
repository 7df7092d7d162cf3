using System.Globalization;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>Polarity, working size, mirror options and confidence of the pair registration.</summary>
public class RegisterPreprocessingTests(ITestOutputHelper output)
{
    private static GrayImage Inverted(GrayImage image)
    {
        var result = image.Clone();
        for (int i = 0; i < result.Pixels.Length; i++) result.Pixels[i] = 1 - result.Pixels[i];
        return result;
    }

    private static (GrayImage Fixed, GrayImage Moving, Transform2D Truth) Pair(int w, int h, int seed, double degrees, double dx, double dy, bool mirrored, int movingWidth = 0, int movingHeight = 0)
    {
        var fixedImage = RegisterTestImages.Tissue(w, h, seed);
        double cx = (w - 1) / 2.0, cy = (h - 1) / 2.0;
        var move = (mirrored ? Transform2D.MirrorX(cx) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, cx, cy)).Then(Transform2D.Translation(dx, dy));
        var moving = RegisterTestImages.Move(fixedImage, move, movingWidth > 0 ? movingWidth : w, movingHeight > 0 ? movingHeight : h, 0.05f);
        return (fixedImage, moving, move.Inverse());
    }

    [Fact]
    public void BrightfieldScansAreInvertedAndRegisterAsWell()
    {
        var (f, m, truth) = Pair(200, 160, 5, -48.5, 3.3, -2.1, false);
        var options = new RegistrationOptions();
        var pf = SectionRegistration.Prepare(Inverted(f), options);
        var pm = SectionRegistration.Prepare(Inverted(m), options);
        Assert.True(pf.Inverted && pm.Inverted);
        Assert.False(SectionRegistration.Prepare(f, options).Inverted);
        Assert.InRange(pf.TissueFraction, 0.15, 0.5); // the blob covers about π·0.3·0.26 ≈ 0.25 of the image
        var r = SectionRegistration.Register(pf, pm, options);
        double error = RegisterTestImages.PointError(r.Best.MovingToFixed, truth, 100, 80);
        Assert.False(r.Best.Mirrored);
        Assert.True(error < 0.15, $"centre error {error}");
        Assert.True(RegisterTestImages.AngleError(r.Best.RotationDegrees, truth.RotationDegrees) < 0.1);
    }

    [Fact]
    public void ForcedPolarityWrongWayRoundDoesNotCrash()
    {
        var (f, m, _) = Pair(120, 100, 6, 10, 0, 0, false);
        var options = new RegistrationOptions { Polarity = TissuePolarity.DarkOnBright };
        var r = SectionRegistration.Register(SectionRegistration.Prepare(f, options), SectionRegistration.Prepare(m, options), options);
        Assert.InRange(r.Confidence, 0, 1);
    }

    [Fact]
    public void LargeScansOfDifferentSizesAreRegisteredAtWorkingSizeAndMappedBackToFullResolution()
    {
        // Full resolution 800×640; the moving scan is larger (880×700), so the two are reduced by different
        // factors for WorkSize = 256 and must be brought to one scale to keep the map rigid.
        var (f, m, truth) = Pair(800, 640, 9, 133.7, 12.4, -20.6, true, 880, 700);
        var options = new RegistrationOptions { WorkSize = 256 };
        var pf = SectionRegistration.Prepare(f, options);
        var pm = SectionRegistration.Prepare(m, options);
        Assert.Equal(256, pf.WorkImage.Width);
        Assert.Equal(256.0 / 800, pf.Scale, 12);
        var r = SectionRegistration.Register(pf, pm, options);
        var map = r.Best.MovingToFixed;
        double error = RegisterTestImages.PointError(map, truth, 440, 350);
        output.WriteLine($"centre error {error:F3} full px, angle error {RegisterTestImages.AngleError(map.RotationDegrees, truth.RotationDegrees):F4}°, det {map.Determinant:F6}");
        Assert.True(r.Best.Mirrored && map.IsMirrored);
        Assert.Equal(-1, map.Determinant, 6); // rigid at full resolution, not scaled
        Assert.True(error < 0.5, $"centre error {error} full-resolution px (0.16 working px)");
        Assert.True(RegisterTestImages.AngleError(map.RotationDegrees, truth.RotationDegrees) < 0.1);
    }

    [Fact]
    public void KnownMirroringRestrictsTheHypotheses()
    {
        var (f, m, _) = Pair(160, 128, 4, 71, 2, 1, true);
        var free = new RegistrationOptions();
        var pf = SectionRegistration.Prepare(f, free);
        var pm = SectionRegistration.Prepare(m, free);
        var no = SectionRegistration.Register(pf, pm, free with { KnownMirrored = false });
        Assert.False(no.Best.Mirrored);
        Assert.False(no.RunnerUp?.Mirrored ?? false);
        var notAllowed = SectionRegistration.Register(pf, pm, free with { AllowMirror = false });
        Assert.False(notAllowed.Best.Mirrored);
        var yes = SectionRegistration.Register(pf, pm, free with { KnownMirrored = true });
        Assert.True(yes.Best.Mirrored);
        Assert.True(no.Best.Ncc < yes.Best.Ncc - 0.1, $"forced unmirrored NCC {no.Best.Ncc} vs mirrored {yes.Best.Ncc}");
    }

    [Fact]
    public void UnrelatedSectionsGetLowConfidence()
    {
        var options = new RegistrationOptions();
        var a = SectionRegistration.Prepare(RegisterTestImages.Tissue(160, 128, 21), options);
        var rng = new Random(3);
        var noise = new GrayImage(160, 128);
        for (int i = 0; i < noise.Pixels.Length; i++) noise.Pixels[i] = (float)rng.NextDouble();
        var r = SectionRegistration.Register(a, SectionRegistration.Prepare(noise, options), options);
        output.WriteLine($"noise: NCC {r.Best.Ncc:F3}, confidence {r.Confidence:F3}");
        Assert.True(r.Confidence < 0.3, $"confidence {r.Confidence}");
    }

    [Fact]
    public void AnEmptySlideGivesZeroConfidenceNotAnError()
    {
        var options = new RegistrationOptions();
        var blank = new GrayImage(96, 80);
        Array.Fill(blank.Pixels, 0.8f);
        var pb = SectionRegistration.Prepare(blank, options);
        Assert.Equal(0, pb.TissueFraction);
        var r = SectionRegistration.Register(SectionRegistration.Prepare(RegisterTestImages.Tissue(96, 80, 2), options), pb, options);
        Assert.Equal(0, r.Confidence);
        Assert.True(double.IsFinite(r.Best.MovingToFixed.M02) && double.IsFinite(r.Best.MovingToFixed.M12));
    }

    [Fact]
    public void MirrorSymmetricSectionsCannotTellTheMirrorAndSaySo()
    {
        // A section symmetric about its vertical midline: mirrored and unmirrored fit equally well.
        var half = RegisterTestImages.Tissue(160, 128, 8);
        var symmetric = new GrayImage(160, 128);
        for (int y = 0; y < 128; y++) for (int x = 0; x < 160; x++) symmetric[x, y] = Math.Max(half[x, y], half[159 - x, y]);
        var moving = RegisterTestImages.Move(symmetric, Transform2D.Rotation(30, 79.5, 63.5), 160, 128);
        var options = new RegistrationOptions();
        var r = SectionRegistration.Register(SectionRegistration.Prepare(symmetric, options), SectionRegistration.Prepare(moving, options), options);
        output.WriteLine($"symmetric: best mirrored {r.Best.Mirrored} NCC {r.Best.Ncc:F4}, runner-up mirrored {r.RunnerUp?.Mirrored} NCC {r.RunnerUp?.Ncc:F4}, confidence {r.Confidence:F3}");
        Assert.NotNull(r.RunnerUp);
        Assert.NotEqual(r.Best.Mirrored, r.RunnerUp!.Mirrored);
        Assert.True(r.Confidence < 0.3, $"confidence {r.Confidence}");
    }

    [Fact]
    public void OtsuThresholdMatchesScikitImage()
    {
        // Reference: skimage.filters.threshold_otsu (Debian python3-skimage), 256 bins. It reports the centre
        // of its bin, we the upper edge of ours: they may differ by up to one bin.
        var rng = new Random(12);
        var values = new float[20000];
        for (int i = 0; i < values.Length; i++)
            values[i] = (float)Math.Clamp(i % 3 == 0 ? 0.7 + 0.08 * Gaussian(rng) : 0.2 + 0.05 * Gaussian(rng), 0, 1);
        using var folder = new NiftiTempFolder();
        var path = folder.File("values.raw");
        var bytes = new byte[values.Length * 4];
        Buffer.BlockCopy(values, 0, bytes, 0, bytes.Length);
        File.WriteAllBytes(path, bytes);
        var (exit, stdout, stderr) = NiftiPython.Process(NiftiPython.Python, [NiftiPython.Tool("skimage_otsu.py"), path, values.Length.ToString(CultureInfo.InvariantCulture)]);
        if (exit == 3) Assert.Fail($"skimage_otsu.py: {stderr.Trim()} (Debian package python3-skimage; tests/run.sh installs it as root)");
        Assert.True(exit == 0, stderr);
        double reference = double.Parse(stdout.Trim(), CultureInfo.InvariantCulture);
        double ours = StackBuild.Imaging.ImageOps.OtsuThreshold(values);
        double bin = (values.Max() - values.Min()) / 256.0;
        output.WriteLine($"Otsu: ours {ours:F5}, scikit-image {reference:F5}, bin {bin:F5}");
        Assert.True(Math.Abs(ours - reference) <= 1.01 * bin, $"ours {ours} vs scikit-image {reference}");
    }

    private static double Gaussian(Random rng) =>
        Math.Sqrt(-2 * Math.Log(1 - rng.NextDouble())) * Math.Cos(2 * Math.PI * rng.NextDouble());
}
