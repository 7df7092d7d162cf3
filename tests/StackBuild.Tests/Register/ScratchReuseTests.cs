using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// Memory kept for reuse must not change a result: a prepared section that makes its working image when asked, and the
/// per-thread scratch of phase correlation's DFT upsampling (docs/benchmarks.md, "Where the memory goes").
/// </summary>
public sealed class ScratchReuseTests
{
    [Theory]
    [InlineData(false)]
    [InlineData(true)]   // a bright-field scan: inverted before it is stretched
    public void AWorkingImageMadeWhenAskedIsTheOneTheSectionWasPreparedWith(bool brightBackground)
    {
        var image = RegisterTestImages.Tissue(96, 80, seed: 5);
        if (brightBackground) for (int i = 0; i < image.Pixels.Length; i++) image.Pixels[i] = 1 - image.Pixels[i];
        var asRead = (float[])image.Pixels.Clone();
        var options = new RegistrationOptions { WorkSize = 512 };   // larger than the image: prepared at scale 1, kept whole
        var kept = SectionRegistration.Prepare(image, options);
        var made = SectionRegistration.PrepareUnreduced(image, options);
        Assert.Equal(brightBackground, made.Inverted);
        Assert.Equal(kept.Inverted, made.Inverted);
        Assert.Equal(kept.WorkImage.Pixels, made.WorkImage.Pixels);        // to the bit, asked for twice
        Assert.Equal(kept.WorkImage.Pixels, made.WorkImage.Pixels);
        Assert.Equal((kept.WorkImage.Width, kept.WorkImage.Height), (made.WorkWidth, made.WorkHeight));
        Assert.Equal(kept.TissueMask, made.TissueMask);
        Assert.Equal(asRead, image.Pixels);                                 // the image as read is left as it was
        Assert.InRange(made.WorkImage.Pixels.Max(), 0.99f, 1f);             // stretched to 0–1, tissue bright
        Assert.Equal(0f, made.WorkImage.Pixels.Min());
    }

    [Fact]
    public void PhaseCorrelationGivesTheSameShiftAfterOtherSizesUsedItsScratch()
    {
        var fixedImage = RegisterTestImages.Tissue(64, 64, seed: 11);
        var moving = RegisterTestImages.Move(fixedImage, Transform2D.Translation(3.35, -2.6), 64, 64);
        var first = PhaseCorrelation.Estimate(fixedImage, moving);
        // Other sizes and upsampling factors in between leave longer and dirtier scratch arrays on this thread.
        var big = RegisterTestImages.Tissue(128, 96, seed: 12);
        PhaseCorrelation.Estimate(big, RegisterTestImages.Move(big, Transform2D.Translation(-7.1, 4.45), 128, 96), new PhaseCorrelationOptions { UpsampleFactor = 50 });
        PhaseCorrelation.Estimate(big, big, new PhaseCorrelationOptions { UpsampleFactor = 3 });
        var again = PhaseCorrelation.Estimate(fixedImage, moving);
        Assert.Equal((first.Dx, first.Dy, first.Peak, first.PeakToSidelobe), (again.Dx, again.Dy, again.Peak, again.PeakToSidelobe));
        // And the shift is the one applied: fixed(x) ≈ moving(x − d), so content moved by (3.35, −2.6) gives d = (−3.35, 2.6)
        // (the convention RegisterPhaseCorrelationTests checks), here within 0.15 px (bilinear moving, default window).
        Assert.InRange(first.Dx, -3.35 - 0.15, -3.35 + 0.15);
        Assert.InRange(first.Dy, 2.6 - 0.15, 2.6 + 0.15);
    }
}
