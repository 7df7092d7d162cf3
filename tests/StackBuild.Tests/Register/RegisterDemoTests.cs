using StackBuild.Demo;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The synthetic demo specimen: brightfield scans with noise and stain gain, mounted at any angle, some face
/// down. The demo records how each section was laid on its slide (PlaneToImage), which is the truth here.
/// </summary>
public class RegisterDemoTests(ITestOutputHelper output)
{
    private static readonly Lazy<DemoSpecimen> Specimen = new(() => DemoSpecimenMaker.Make(new DemoOptions { Seed = 7, Sections = 16, Size = 256 }));

    private static IEnumerable<int> Usable(DemoSpecimen s) =>
        Enumerable.Range(0, s.Sections.Count).Where(i => s.Images[i] != null && !s.Sections[i].Torn && !s.Sections[i].Excluded);

    [Fact]
    public void EachScanIsRegisteredOntoItsOwnTruthPlane()
    {
        // Exact truth: scan n was sampled from truth plane n − 1 through PlaneToImage, so the scan-to-plane map is its inverse.
        var specimen = Specimen.Value;
        var options = new RegistrationOptions();
        var rows = new List<(int Number, double Centre, double Angle, bool MirrorRight, double Confidence)>();
        foreach (int i in Usable(specimen))
        {
            var section = specimen.Sections[i];
            var scan = SectionRegistration.Prepare(Scaled(specimen.Images[i]!), options);
            Assert.True(scan.Inverted, "a brightfield scan must be inverted");
            var r = SectionRegistration.Register(SectionRegistration.Prepare(Plane(specimen, i), options), scan, options);
            var truth = section.PlaneToImage.Inverse();
            rows.Add((section.Number, RegisterTestImages.PointError(r.Best.MovingToFixed, truth, 127.5, 101.5),
                RegisterTestImages.AngleError(r.Best.RotationDegrees, truth.RotationDegrees), r.Best.Mirrored == section.Mirrored, r.Confidence));
        }
        foreach (var e in rows)
            output.WriteLine($"section {e.Number}: centre error {e.Centre:F3} px, angle error {e.Angle:F4}°, mirror right {e.MirrorRight}, confidence {e.Confidence:F3}");
        double medianCentre = RegisterTestImages.Median(rows.Select(e => e.Centre)), medianAngle = RegisterTestImages.Median(rows.Select(e => e.Angle));
        output.WriteLine($"{rows.Count} scans: median centre error {medianCentre:F4} px, median angle error {medianAngle:F4}°");
        Assert.True(rows.Count >= 8, $"only {rows.Count} usable sections");
        Assert.All(rows, e => Assert.True(e.MirrorRight, $"section {e.Number}: wrong mirror"));
        Assert.True(medianCentre <= 0.1, $"median centre error {medianCentre} px");
        Assert.True(medianAngle <= 0.1, $"median angle error {medianAngle}°");
    }

    [Fact]
    public void NeighbouringScansAgreeWithTheirTruthPlanes()
    {
        // Neighbouring planes differ (the tissue changes from one section to the next: registering plane k+1 onto
        // plane k directly shows an apparent shift of 0.5–1.6 px here). So the scan pair is compared with the
        // registration of the two truth planes carried through the known mountings. Both estimate the same
        // apparent motion from differently degraded images (noise, stain, inversion), so they agree to a fraction
        // of that motion, not exactly: median ≤ 0.5 px, none over 1 px.
        var specimen = Specimen.Value;
        var options = new RegistrationOptions();
        var usable = Usable(specimen).ToHashSet();
        var differences = new List<double>();
        foreach (int i in usable.Where(i => usable.Contains(i + 1)))
        {
            var (a, b) = (specimen.Sections[i], specimen.Sections[i + 1]);
            var scans = SectionRegistration.Register(SectionRegistration.Prepare(Scaled(specimen.Images[i]!), options),
                SectionRegistration.Prepare(Scaled(specimen.Images[i + 1]!), options), options);
            var planes = SectionRegistration.Register(SectionRegistration.Prepare(Plane(specimen, i), options), SectionRegistration.Prepare(Plane(specimen, i + 1), options), options);
            var expected = b.PlaneToImage.Inverse().Then(planes.Best.MovingToFixed).Then(a.PlaneToImage);
            var img = specimen.Images[i + 1]!;
            double d = RegisterTestImages.PointError(scans.Best.MovingToFixed, expected, (img.Width - 1) / 2.0, (img.Height - 1) / 2.0);
            differences.Add(d);
            output.WriteLine($"sections {a.Number}->{b.Number}: scans vs planes {d:F3} px, mirrored {scans.Best.Mirrored} (truth {a.Mirrored != b.Mirrored}), confidence {scans.Confidence:F3}");
            Assert.Equal(a.Mirrored != b.Mirrored, scans.Best.Mirrored);
        }
        Assert.True(differences.Count >= 5, $"only {differences.Count} neighbouring pairs");
        Assert.True(RegisterTestImages.Median(differences) <= 0.5, $"median difference {RegisterTestImages.Median(differences)} px");
        Assert.True(differences.Max() <= 1, $"largest difference {differences.Max()} px");
    }

    private static GrayImage Plane(DemoSpecimen specimen, int k)
    {
        var v = specimen.Truth;
        return new GrayImage(v.Nx, v.Ny, v.Plane(k).ToArray());
    }

    private static GrayImage Scaled(GrayImage eightBit)
    {
        var img = eightBit.Clone();
        for (int i = 0; i < img.Pixels.Length; i++) img.Pixels[i] /= 255f;
        return img;
    }
}
