using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The half-size search (<see cref="RegistrationOptions.CoarseToFine"/>) on sections large enough to use it: axial planes of
/// the Colin27 "ch2" MRI from Debian's mricron-data, enlarged 2× (600 px canvases, tissue about 200 px from the centre),
/// each moved by a random rigid map, registered back with and without it. Truth is the map the test applied.
/// </summary>
public class CoarseToFineTests(ITestOutputHelper output)
{
    private const int Size = 600;

    private static List<RegisterMriTests.PairCase> LargeCases(int seed)
    {
        var small = RegisterMriTests.Cases(sections: 4, perSection: 2, seed);
        // Pixel i of the 300 px plane covers pixels 2i and 2i + 1 here: x ↦ 2x + 0.5.
        var enlarge = new Transform2D(2, 0, 0.5, 0, 2, 0.5);
        double c = (Size - 1) / 2.0;
        var large = new List<RegisterMriTests.PairCase>();
        foreach (var pc in small)
        {
            var fixedImage = RegisterTestImages.Move(pc.Fixed, enlarge, Size, Size);
            // The same motion on the enlarged canvas: enlarge⁻¹, the small motion, enlarge.
            var move = enlarge.Inverse().Then(pc.Truth.Inverse()).Then(enlarge);
            var moving = RegisterTestImages.Move(fixedImage, move, Size, Size);
            large.Add(pc with { Fixed = fixedImage, Moving = moving, Truth = move.Inverse(), MovedCentre = move.Apply(c, c) });
        }
        return large;
    }

    [Fact]
    public void OnLargeSectionsTheHalfSizeSearchFindsThePlacementAsWellAsTheSingleLevel()
    {
        var cases = LargeCases(seed: 17);
        var options = new RegistrationOptions { WorkSize = Size };
        // The path under test is taken only when both canvases have a half whose tissue reaches 64 half pixels.
        foreach (var pc in cases.Take(2))
        {
            var prepared = SectionRegistration.Prepare(pc.Fixed, options);
            Assert.NotNull(prepared.Canvas.Half);
            Assert.True(prepared.Canvas.Half!.TissueRadius >= 64, $"tissue radius on the half canvas {prepared.Canvas.Half.TissueRadius:F0} px: the half-size path would not be used");
        }
        var twoLevel = RegisterMriTests.Run(cases, options);
        var oneLevel = RegisterMriTests.Run(cases, options with { CoarseToFine = false });
        output.WriteLine("coarse to fine: " + RegisterMriTests.Summary(twoLevel));
        output.WriteLine("single level:   " + RegisterMriTests.Summary(oneLevel));
        // The targets the single level meets on the 300 px sections (RegisterMriTests), in pixels of this 2× larger canvas.
        Assert.All(twoLevel, o => Assert.True(o.MirrorRight, $"section {o.Case.Section}: mirror wrong"));
        Assert.True(RegisterTestImages.Median(twoLevel.Select(o => o.CentreError)) <= 0.1, RegisterMriTests.Summary(twoLevel));
        Assert.True(RegisterTestImages.Median(twoLevel.Select(o => o.AngleError)) <= 0.05, RegisterMriTests.Summary(twoLevel));
        Assert.True(twoLevel.Max(o => o.CentreError) <= 0.5, RegisterMriTests.Summary(twoLevel));
        // And case by case within a quarter pixel of what the single level finds.
        for (int i = 0; i < cases.Count; i++)
        {
            double apart = RegisterTestImages.PointError(twoLevel[i].Result.Best.MovingToFixed, oneLevel[i].Result.Best.MovingToFixed,
                cases[i].MovedCentre.X, cases[i].MovedCentre.Y);
            Assert.True(apart <= 0.25, $"case {i} (section {cases[i].Section}): the two ways land {apart:F3} px apart");
            Assert.Equal(oneLevel[i].Result.Best.Mirrored, twoLevel[i].Result.Best.Mirrored);
        }
    }

    [Fact]
    public void ACanvasDroppedFromTheCacheIsMadeAgainAndRegistersTheSame()
    {
        var cases = RegisterMriTests.Cases(sections: 3, perSection: 1, seed: 5);
        var options = new RegistrationOptions();
        var own = cases.Select(c => SectionRegistration.Prepare(c.Moving, options)).ToList();
        var cache = new CanvasCache(2);
        var cached = cases.Select(c => SectionRegistration.PrepareUnreduced(c.Moving, options, cache)).ToList();
        Assert.Equal(0, cache.Made); // canvases are made when a pair first needs them
        // (0, 1), (1, 2) and then (0, 2): section 0's canvas was dropped for section 2's and is made again.
        foreach (var (a, b) in new[] { (0, 1), (1, 2), (0, 2) })
        {
            var expected = SectionRegistration.Register(own[a], own[b], options);
            var actual = SectionRegistration.Register(cached[a], cached[b], options);
            Assert.Equal(expected.Best.MovingToFixed, actual.Best.MovingToFixed);
            Assert.Equal(expected.Best.Ncc, actual.Best.Ncc);
            Assert.Equal(expected.Confidence, actual.Confidence);
        }
        Assert.Equal(4, cache.Made);
    }
}
