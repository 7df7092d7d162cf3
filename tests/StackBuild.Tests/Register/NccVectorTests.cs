using System.Runtime.Intrinsics.X86;
using StackBuild.Geometry;
using StackBuild.Register;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The NCC that scores every hypothesis and every step of the polish is computed four pixels at a time where the processor
/// has AVX. It must give the one-pixel-at-a-time NCC (the code before it) to rounding, for maps that keep the moving
/// tissue inside the canvas and for maps that push it over the edge or off the canvas altogether.
/// </summary>
public sealed class NccVectorTests
{
    public static TheoryData<double, double, double, bool> Maps => new()
    {
        { 0, 0, 0, false },
        { 19.6, 3.25, -7.75, true },
        { -143.2, 40.4, 12.1, false },
        { 90, 150, 0, false },     // the moving tissue half over the right edge
        { 0, -230, 40, true },     // almost entirely off the canvas
        { 12, 900, 900, false },   // entirely off: only the fixed mask counts
    };

    [Theory]
    [MemberData(nameof(Maps))]
    public void FourAtATimeGivesTheOneAtATimeNccToRounding(double degrees, double dx, double dy, bool mirrored)
    {
        if (!Avx.IsSupported) return; // nothing to compare: Ncc is the scalar code on this processor
        var options = new RegistrationOptions();
        var fixedSection = SectionRegistration.Prepare(RegisterTestImages.Tissue(200, 170, 3), options);
        var moving = SectionRegistration.Prepare(RegisterTestImages.Tissue(200, 170, 4), options);
        var fixedCanvas = fixedSection.Canvas;
        var movingCanvas = moving.Canvas;
        Assert.Equal(fixedCanvas.Size, movingCanvas.Size);
        using var engine = new PairEngine(fixedCanvas, movingCanvas, 0.12);
        double c = fixedCanvas.Centre;
        var map = (mirrored ? Transform2D.MirrorX(c) : Transform2D.Identity).Then(Transform2D.Rotation(degrees, c, c)).Then(Transform2D.Translation(dx, dy));
        double scalar = engine.NccScalar(map), vector = engine.NccVector(map);
        Assert.True(Math.Abs(scalar - vector) <= 1e-9, $"scalar {scalar:R}, vector {vector:R}");
        Assert.Equal(engine.Ncc(map), vector);
    }

    [Fact]
    public void AMatchScoresHigherThanAMisplacementWithBoth()
    {
        // A control that the comparison above compares something: the same section laid on itself scores near 1 with both,
        // moved by 9 pixels clearly less.
        if (!Avx.IsSupported) return;
        var options = new RegistrationOptions();
        var section = SectionRegistration.Prepare(RegisterTestImages.Tissue(180, 180, 9), options);
        using var engine = new PairEngine(section.Canvas, section.Canvas, 0.12);
        Assert.True(engine.NccVector(Transform2D.Identity) > 0.999);
        Assert.True(engine.NccScalar(Transform2D.Identity) > 0.999);
        Assert.True(engine.NccVector(Transform2D.Translation(9, 0)) < 0.95);
    }
}
