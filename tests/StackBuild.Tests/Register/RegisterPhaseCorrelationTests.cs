using StackBuild.Register;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Phase correlation against analytic truth: a Fourier-shifted image has a known sub-pixel shift.</summary>
public class RegisterPhaseCorrelationTests
{
    [Theory]
    [InlineData(3.37, -5.81)]
    [InlineData(-12.45, 7.05)]
    [InlineData(0.5, 0.25)]
    [InlineData(20.95, -0.65)]
    public void RecoversAFourierShiftToAQuarterOfTheUpsampledStep(double dx, double dy)
    {
        // Truth: the shift theorem (common practice). Guizar-Sicairos et al. (2008) state the error is bounded by
        // the upsampled grid step, 1/20 px here; we require ≤ 0.05 px.
        var image = RegisterTestImages.Tissue(160, 128, seed: 7);
        var moved = RegisterTestImages.FourierShift(image, dx, dy);
        var est = PhaseCorrelation.Estimate(image, moved, new PhaseCorrelationOptions { Window = ApodisationWindow.None });
        // fixed(x) ≈ moving(x − d): here fixed = moved content, so d = +shift when moving = image.
        var back = PhaseCorrelation.Estimate(moved, image);
        Assert.True(Math.Abs(est.Dx + dx) <= 0.05 && Math.Abs(est.Dy + dy) <= 0.05, $"got ({est.Dx}, {est.Dy}) for ({-dx}, {-dy})");
        Assert.True(Math.Abs(back.Dx - dx) <= 0.05 && Math.Abs(back.Dy - dy) <= 0.05, $"got ({back.Dx}, {back.Dy}) for ({dx}, {dy})");
        Assert.True(est.Peak > 0.5, $"peak {est.Peak}");
        Assert.True(back.PeakToSidelobe > 20, $"PSR {back.PeakToSidelobe}");
    }

    [Fact]
    public void WholePixelModeAndForegroundMaskFindTheShiftToo()
    {
        var image = RegisterTestImages.Tissue(128, 128, seed: 3);
        var moved = RegisterTestImages.FourierShift(image, 9, -4);
        var whole = PhaseCorrelation.Estimate(moved, image, new PhaseCorrelationOptions { UpsampleFactor = 1 });
        Assert.Equal((9.0, -4.0), (whole.Dx, whole.Dy));
        var masked = PhaseCorrelation.Estimate(moved, image, new PhaseCorrelationOptions { ForegroundMask = true, Window = ApodisationWindow.Hann });
        Assert.True(Math.Abs(masked.Dx - 9) <= 0.1 && Math.Abs(masked.Dy + 4) <= 0.1, $"got ({masked.Dx}, {masked.Dy})");
    }

    [Fact]
    public void UnrelatedImagesGiveALowPeakAndSidelobeRatio()
    {
        var a = RegisterTestImages.Tissue(128, 128, seed: 1);
        var rng = new Random(5);
        var noise = new StackBuild.Imaging.GrayImage(128, 128);
        for (int i = 0; i < noise.Pixels.Length; i++) noise.Pixels[i] = (float)rng.NextDouble();
        var same = PhaseCorrelation.Estimate(a, RegisterTestImages.FourierShift(a, 2.5, 1.5));
        var unrelated = PhaseCorrelation.Estimate(a, noise);
        Assert.True(unrelated.Peak < 0.1 && unrelated.PeakToSidelobe < 8, $"unrelated: peak {unrelated.Peak}, PSR {unrelated.PeakToSidelobe}");
        Assert.True(same.PeakToSidelobe > 3 * unrelated.PeakToSidelobe, $"same {same.PeakToSidelobe} vs unrelated {unrelated.PeakToSidelobe}");
    }
}
