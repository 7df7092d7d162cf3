using StackBuild.Geometry;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Pairs made from one synthetic textured section and a copy moved by a known rigid map (any angle, some
/// mirrored), resampled bilinearly by the test helper. Truth is the map the test applied.
/// </summary>
public class RegisterSyntheticTests(ITestOutputHelper output)
{
    public static TheoryData<double, double, double, bool> Cases => new()
    {
        { 0, 0, 0, false },
        { 37.3, 4.25, -6.5, false },
        { -121.8, -3.4, 2.2, false },
        { 179.6, 1.1, 0.7, false },
        { 64.2, -5.3, 3.9, true },
        { -95.5, 2.6, -4.4, true },
    };

    [Theory]
    [MemberData(nameof(Cases))]
    public void RecoversAKnownRigidMap(double degrees, double dx, double dy, bool mirrored)
    {
        const int w = 200, h = 160;
        var fixedImage = RegisterTestImages.Tissue(w, h, seed: 11);
        double cx = (w - 1) / 2.0, cy = (h - 1) / 2.0;
        // Content of the fixed image moved by: mirror about the centre, turn about the centre, shift.
        var move = (mirrored ? Transform2D.MirrorX(cx) : Transform2D.Identity)
            .Then(Transform2D.Rotation(degrees, cx, cy)).Then(Transform2D.Translation(dx, dy));
        var movingImage = RegisterTestImages.Move(fixedImage, move, w, h);
        var truth = move.Inverse(); // moving pixel → fixed pixel

        var options = new RegistrationOptions();
        var result = SectionRegistration.Register(SectionRegistration.Prepare(fixedImage, options), SectionRegistration.Prepare(movingImage, options), options);
        var best = result.Best;
        double pointError = RegisterTestImages.PointError(best.MovingToFixed, truth, cx, cy);
        double angleError = RegisterTestImages.AngleError(best.MovingToFixed.RotationDegrees, truth.RotationDegrees);
        output.WriteLine($"mirror {best.Mirrored} (truth {mirrored}), angle error {angleError:F4}°, centre error {pointError:F4} px, NCC {best.Ncc:F4}, " +
                         $"PSR {best.PeakToSidelobe:F1}, confidence {result.Confidence:F3}, runner-up {result.RunnerUp?.Mirrored} {result.RunnerUp?.RotationDegrees:F1}° NCC {result.RunnerUp?.Ncc:F4}");
        Assert.Equal(mirrored, best.Mirrored);
        Assert.Equal(mirrored, best.MovingToFixed.IsMirrored);
        Assert.True(angleError <= 0.1, $"angle error {angleError}°");
        Assert.True(pointError <= 0.15, $"centre error {pointError} px");
        Assert.True(result.Confidence > 0.5, $"confidence {result.Confidence}");
        Assert.NotNull(result.RunnerUp);
        Assert.True(result.RunnerUp!.Ncc < best.Ncc);
    }
}
