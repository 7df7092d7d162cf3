using StackBuild.Demo;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.IO;
using StackBuild.Pipeline;
using StackBuild.Render;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>One small demo series, built once in the default frame.</summary>
public sealed class OutputFrameFixture : IDisposable
{
    public string Folder { get; } = Directory.CreateTempSubdirectory("sb-frame-").FullName;
    public string Series => Path.Combine(Folder, "series");
    public BuildResult Default { get; }
    public DemoSpecimen Specimen { get; }

    public OutputFrameFixture()
    {
        Specimen = DemoSpecimenMaker.Make(new DemoOptions { Sections = 10, Size = 128, Seed = 11 });
        DemoSpecimenMaker.WriteFiles(Specimen, Series);
        Default = BuildPipeline.Run(new BuildOptions { Input = Series });
    }

    public void Dispose()
    {
        try { Directory.Delete(Folder, true); } catch (IOException) { }
    }
}

/// <summary>The output frame: reference section, turn, mirror, tissue crop and the world position of the tissue.</summary>
public sealed class OutputFrameTests(OutputFrameFixture fixture, ITestOutputHelper output) : IClassFixture<OutputFrameFixture>
{
    private static Transform2D Matrix(SectionRecord s) =>
        new(s.Matrix![0][0], s.Matrix[0][1], s.Matrix[0][2], s.Matrix[1][0], s.Matrix[1][1], s.Matrix[1][2]);

    private int PlacedSection(int skip) => fixture.Default.Record.Sections.Where(s => s.Status == SectionOutcome.Aligned).Skip(skip).First().Number;

    [Fact]
    public void TheReferenceSectionKeepsItsScannedFrameTurnedAndMirroredAsAsked()
    {
        int n = PlacedSection(3);
        var built = BuildPipeline.Run(new BuildOptions
        {
            Input = fixture.Series,
            Frame = new FrameOptions { ReferenceSection = n, RotateDegrees = 30, Mirror = true },
        });
        var record = built.Record.Sections.Single(s => s.Number == n);
        var m = Matrix(record);
        double scale = Math.Sqrt(Math.Abs(m.Determinant));
        // Section n's image reaches its plane by a pure scale, then the asked-for turn (clockwise as displayed) and mirror.
        var expected = Transform2D.Rotation(30).Then(Transform2D.MirrorX());
        output.WriteLine($"section {n}: linear part/scale = [{m.M00 / scale:0.####} {m.M01 / scale:0.####}; {m.M10 / scale:0.####} {m.M11 / scale:0.####}]");
        Assert.Equal(expected.M00, m.M00 / scale, 6);
        Assert.Equal(expected.M01, m.M01 / scale, 6);
        Assert.Equal(expected.M10, m.M10 / scale, 6);
        Assert.Equal(expected.M11, m.M11 / scale, 6);
        Assert.Equal(n, built.Record.ReferenceSection);
        Assert.Equal("--reference", built.Record.Frame!.ReferenceChosenBy);
        Assert.True(built.Record.Frame.Mirror);
        Assert.Equal(30, built.Record.Frame.RotateDegrees);

        // The whole stack turns together: the map between any two sections' planes is the same as in the default frame
        // (sections relative to each other do not depend on the frame).
        foreach (var other in built.Record.Sections.Where(s => s.Status == SectionOutcome.Aligned && s.Number != n))
        {
            var a = Matrix(fixture.Default.Record.Sections.Single(s => s.Number == other.Number))
                .Then(Matrix(fixture.Default.Record.Sections.Single(s => s.Number == n)).Inverse());
            var b = Matrix(other).Then(m.Inverse());
            Assert.Equal(a.RotationDegrees, b.RotationDegrees, 3);
            Assert.Equal(a.IsMirrored, b.IsMirrored);
        }
    }

    [Fact]
    public void MirrorFlipsThePlanesLeftRight()
    {
        int n = PlacedSection(0);
        var plain = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = n } });
        var mirrored = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = n, Mirror = true } });
        var (p, q) = (plain.Volume, mirrored.Volume);
        Assert.Equal((p.Nx, p.Ny, p.Nz), (q.Nx, q.Ny, q.Nz));
        int k = plain.Record.Sections.Single(s => s.Number == n).ZIndex;
        var flipped = new float[p.Nx * p.Ny];
        for (int j = 0; j < p.Ny; j++)
        for (int i = 0; i < p.Nx; i++)
            flipped[j * p.Nx + i] = p[p.Nx - 1 - i, j, k];
        double withFlip = Correlation(flipped, q.Plane(k).ToArray());
        double without = Correlation(p.Plane(k).ToArray(), q.Plane(k).ToArray());
        output.WriteLine($"correlation with the flipped plain plane {withFlip:0.####}, with the plain plane {without:0.####}");
        Assert.True(withFlip > 0.97, $"mirrored plane vs flipped plain plane r = {withFlip}");
        // The phantom is nearly symmetric, so the unflipped plane also correlates; the flipped one must fit far better.
        Assert.True(1 - withFlip < 0.3 * (1 - without), $"the mirrored plane fits the flipped plane (r {withFlip}) not much better than the unflipped one (r {without})");
    }

    [Fact]
    public void GridIsCroppedToTheTissueAndItsCentreLandsWhereAsked()
    {
        var centre = (X: 1.5, Y: -2.0, Z: 10.0);
        var canvas = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { CropToTissue = false, CentreMm = centre } });
        var cropped = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { MarginUm = 100, CentreMm = centre } });
        var f = cropped.Record.Frame!;
        output.WriteLine($"canvas grid {canvas.Volume.Nx}×{canvas.Volume.Ny}, cropped {cropped.Volume.Nx}×{cropped.Volume.Ny}; tissue box {string.Join(", ", f.TissueBoxVoxels!.Select(v => v.ToString("0.#")))}");
        Assert.Equal("canvas", canvas.Record.Frame!.Crop);
        Assert.Equal("tissue", f.Crop);
        Assert.True(cropped.Volume.Nx < canvas.Volume.Nx && cropped.Volume.Ny < canvas.Volume.Ny);

        // The margin: 100 µm = 5 voxels of 20 µm on every side of the tissue box (the demo's tissue lies well inside its images).
        double marginVoxels = 100 / (cropped.Record.VoxelSizeMm[0] * 1000);
        var box = f.TissueBoxVoxels!;
        Assert.InRange(box[0] + 0.5, marginVoxels - 1, marginVoxels + 1);
        Assert.InRange(box[1] + 0.5, marginVoxels - 1, marginVoxels + 1);
        Assert.InRange(cropped.Volume.Nx - 0.5 - box[2], marginVoxels - 1, marginVoxels + 1);
        Assert.InRange(cropped.Volume.Ny - 0.5 - box[3], marginVoxels - 1, marginVoxels + 1);

        // Nothing but background was cut: of the canvas build's voxels clearly darker than the slide (tissue; the demo is
        // brightfield; 0 = outside every image), those inside the cropped grid (found through the two affines) are nearly all.
        var v = canvas.Volume;
        var sorted = v.Voxels.Where(x => x > 0).Order().ToArray();
        float slide = sorted[sorted.Length / 2], dark = sorted[sorted.Length / 100];
        float threshold = (slide + dark) / 2;
        var toCropped = v.Affine.Then(cropped.Volume.Affine.Inverse());
        int all = 0, kept = 0;
        for (int k = 0; k < v.Nz; k++)
        for (int j = 0; j < v.Ny; j++)
        for (int i = 0; i < v.Nx; i++)
        {
            float x = v[i, j, k];
            if (!(x > 0 && x < threshold)) continue;
            all++;
            var at = toCropped.Apply(i, j, k);
            if (at.X > -0.5 && at.X < cropped.Volume.Nx - 0.5 && at.Y > -0.5 && at.Y < cropped.Volume.Ny - 0.5) kept++;
        }
        output.WriteLine($"tissue voxels inside the cropped grid: {kept} of {all}");
        Assert.True(all > 1000 && kept >= 0.999 * all, $"the crop lost tissue ({kept} of {all} tissue voxels kept)");

        // The affine puts the tissue's centre (middle of the box, middle of the stack) at the asked world position.
        var affine = Affine.FromRows(cropped.Record.Affine[0], cropped.Record.Affine[1], cropped.Record.Affine[2]);
        var c = affine.Apply((box[0] + box[2]) / 2, (box[1] + box[3]) / 2, (cropped.Volume.Nz - 1) / 2.0);
        Assert.Equal(centre.X, c.X, 9);
        Assert.Equal(centre.Y, c.Y, 9);
        Assert.Equal(centre.Z, c.Z, 9);
    }

    [Fact]
    public void AQuarterTurnSwapsTheGridSides()
    {
        int n = PlacedSection(0);
        var straight = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = n } });
        var turned = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = n, RotateDegrees = 90 } });
        output.WriteLine($"straight {straight.Volume.Nx}×{straight.Volume.Ny}, turned {turned.Volume.Nx}×{turned.Volume.Ny}");
        Assert.InRange(turned.Volume.Nx, straight.Volume.Ny - 1, straight.Volume.Ny + 1);
        Assert.InRange(turned.Volume.Ny, straight.Volume.Nx - 1, straight.Volume.Nx + 1);
    }

    [Fact]
    public void AReferenceThatIsNotAScannedSectionIsRefusedWithTheOptionNamed()
    {
        var e = Assert.Throws<InputProblemException>(() => BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = 999 } }));
        output.WriteLine(e.Message);
        Assert.Contains("--reference 999", e.Message);
        Assert.Contains("no section 999", e.Message);
        var missing = fixture.Specimen.Sections.FirstOrDefault(s => s.Lost || s.Excluded);
        if (missing is not null)
        {
            var m = Assert.Throws<InputProblemException>(() => BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Frame = new FrameOptions { ReferenceSection = missing.Number } }));
            Assert.Contains($"--reference {missing.Number}", m.Message);
        }
    }

    [Fact]
    public void VoxelSizeResamplesThePlanesAndKeepsTheTissueCentre()
    {
        var native = fixture.Default;
        var fine = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, VoxelSizeUm = 25 });
        output.WriteLine($"native {native.Volume.Nx}×{native.Volume.Ny}×{native.Volume.Nz}, 25 µm {fine.Volume.Nx}×{fine.Volume.Ny}×{fine.Volume.Nz}; {fine.Record.Parameters.PlaneResampling}");
        // 50 µm sections resampled to 25 µm planes: 2·Nz − 1 planes, isotropic 25 µm voxels (in-plane from --voxel-size too).
        Assert.Equal(2 * native.Volume.Nz - 1, fine.Volume.Nz);
        Assert.Equal(new[] { 0.025, 0.025, 0.025 }, fine.Record.VoxelSizeMm.Select(v => Math.Round(v, 9)));
        Assert.Equal(GapFill.Flow, fine.Record.Parameters.PlaneResampling!.Method);
        foreach (var s in fine.Record.Sections) Assert.Equal(2.0 * s.ZIndex, s.VolumeZ!.Value, 9);
        // The tissue centre stays at world (0, 0, 0): the middle of the stack along k is the same place in both.
        var a = Affine.FromRows(native.Record.Affine[0], native.Record.Affine[1], native.Record.Affine[2]);
        var b = Affine.FromRows(fine.Record.Affine[0], fine.Record.Affine[1], fine.Record.Affine[2]);
        var boxA = native.Record.Frame!.TissueBoxVoxels!;
        var boxB = fine.Record.Frame!.TissueBoxVoxels!;
        var p = a.Apply((boxA[0] + boxA[2]) / 2, (boxA[1] + boxA[3]) / 2, (native.Volume.Nz - 1) / 2.0);
        var q = b.Apply((boxB[0] + boxB[2]) / 2, (boxB[1] + boxB[3]) / 2, (fine.Volume.Nz - 1) / 2.0);
        Assert.Equal((0.0, 0.0, 0.0), (Math.Round(p.X, 9), Math.Round(p.Y, 9), Math.Round(p.Z, 9)));
        Assert.Equal((0.0, 0.0, 0.0), (Math.Round(q.X, 9), Math.Round(q.Y, 9), Math.Round(q.Z, 9)));
    }

    [Fact]
    public void TemplateGridTakesTheTemplatesVoxelsAndAxes()
    {
        // The template: the specimen's truth volume 2× coarser on every axis with a new contrast (nibabel, see the tool).
        var template = Path.Combine(fixture.Folder, "template.nii.gz");
        var truth = Path.Combine(fixture.Folder, DemoSpecimenMaker.TruthVolumeFileName);
        StackBuild.Nifti.NiftiFile.Write(truth, fixture.Specimen.Truth);
        NiftiPython.Run("template_world_check.py", "make", truth, template, "2");
        var t = StackBuild.Nifti.NiftiFile.Read(template);
        var built = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Template = new TemplateOptions { Path = template, TemplateGrid = true } });
        var sizes = t.Affine.VoxelSizes;
        output.WriteLine($"template voxels {sizes.I} × {sizes.J} × {sizes.K} mm, axes {t.Affine.AxisCodes.Code}; built {string.Join(" × ", built.Record.VoxelSizeMm)} mm, axes {built.Record.AxisCodes}, {built.Record.Frame!.Describe()}");
        Assert.Equal(new[] { sizes.I, sizes.J, sizes.K }.Select(v => Math.Round(v, 6)), built.Record.VoxelSizeMm.Select(v => Math.Round(v, 6)));
        Assert.Equal(t.Affine.AxisCodes.Code, built.Record.AxisCodes);
        Assert.Equal("template", built.Record.Frame.Template!.Grid);
        // The template's lattice: every built voxel index maps to a whole template voxel index (cropped, not resampled off-grid).
        var toTemplate = Affine.FromRows(built.Record.Affine[0], built.Record.Affine[1], built.Record.Affine[2]).Then(t.Affine.Inverse());
        for (int r = 0; r < 3; r++)
        for (int c = 0; c < 4; c++)
            Assert.True(Math.Abs(toTemplate[r, c] - Math.Round(toTemplate[r, c])) < 1e-4, $"built voxel → template voxel [{r},{c}] = {toTemplate[r, c]}");

        // The wrong cut axis gives a poor global agreement, and the build says so.
        var wrong = BuildPipeline.Run(new BuildOptions { Input = fixture.Series, Template = new TemplateOptions { Path = template, CutAxis = 'j' } });
        output.WriteLine($"cut axis j: agreement {wrong.Record.Frame!.Template!.GlobalAgreement}; warnings: {string.Join(" | ", wrong.Record.Warnings)}");
        Assert.Contains(wrong.Record.Warnings, w => w.Contains("--template-axis"));

        // Sections beyond the template are refused with the planes named and what to check.
        var e = Assert.Throws<InputProblemException>(() => BuildPipeline.Run(new BuildOptions
        {
            Input = fixture.Series, Template = new TemplateOptions { Path = template, FirstPlane = 1000 },
        }));
        output.WriteLine(e.Message);
        Assert.Contains("fall inside the template", e.Message);
        Assert.Contains("--template-first-plane", e.Message);
    }

    [Fact]
    public void PointInTheAffineMovesOnlyTheTranslation()
    {
        var a = Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.05, 100, 80, 10);
        var moved = OutputFrame.PlacePointAt(a, (10, 20, 3), (1, 2, 3));
        var p = moved.Apply(10, 20, 3);
        Assert.Equal((1.0, 2.0, 3.0), (Math.Round(p.X, 12), Math.Round(p.Y, 12), Math.Round(p.Z, 12)));
        for (int r = 0; r < 3; r++) for (int c = 0; c < 3; c++) Assert.Equal(a[r, c], moved[r, c]);
    }

    private static double Correlation(float[] a, float[] b)
    {
        double ma = a.Average(x => (double)x), mb = b.Average(x => (double)x), sab = 0, saa = 0, sbb = 0;
        for (int i = 0; i < a.Length; i++) { double u = a[i] - ma, v = b[i] - mb; sab += u * v; saa += u * u; sbb += v * v; }
        return sab / Math.Sqrt(saa * sbb);
    }
}
