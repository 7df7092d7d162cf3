using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Pipeline;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// StackBuild's volumes handed to an outside registration client: elastix (Debian package <c>elastix</c>),
/// which reads the NIfTI headers through ITK and registers rigidly by mutual information. The reference is the
/// demo series' own ground truth, demo-series/truth.nii.gz. Volumes are halved in plane (our 2 × 2 block
/// average, affine kept consistent) so each elastix run takes a few seconds.
/// </summary>
public sealed class ElastixHandOffTests(ITestOutputHelper output) : IDisposable
{
    private readonly NiftiTempFolder _temp = new();

    public void Dispose() => _temp.Dispose();

    private static string TruthVolumePath => Path.Combine(RepositoryPaths.DemoSeries, "truth.nii.gz");

    /// <summary>
    /// Why the output frame must be chosen by the user: a rigid, intensity-driven registration recovers a
    /// moderate in-plane turn but not a quarter turn. The turned volumes are the truth's own voxels with only the
    /// affine changed (rotated about the world's anterior axis, the section plane's normal for RIP axes), so the
    /// exact answer is known and no resampling blurs the data; elastix sees the turn only through the header.
    /// Measured with elastix 5.0.1 (Debian 12): 30° ends at 29.999°; 90° ends at 0.27°, i.e. elastix settles
    /// back near the unturned pose and the quarter turn is simply lost.
    /// </summary>
    [Fact]
    public void ElastixRecoversAThirtyDegreeTurnButNotAQuarterTurn()
    {
        var truth = ElastixSupport.HalveInPlane(NiftiFile.Read(TruthVolumePath).ToVolume());
        var fixedPath = _temp.File("truth-half.nii");
        NiftiFile.Write(fixedPath, truth);
        // Points where the truth holds tissue, to measure how far apart two maps put the specimen.
        var tissue = TissuePoints(truth, 0.1f);

        var angles = new Dictionary<double, double>();
        foreach (double degrees in new[] { 30.0, 90.0 })
        {
            var turn = Rigid3D.AboutAnterior(degrees);
            var turned = new Volume(truth.Nx, truth.Ny, truth.Nz, truth.Affine.Then(turn), truth.Voxels);
            var movingPath = _temp.File($"turned-{degrees:0}.nii");
            NiftiFile.Write(movingPath, turned);
            var run = ElastixSupport.RegisterRigid(fixedPath, movingPath, _temp.File($"elastix-{degrees:0}"));
            // elastix maps fixed points to moving points; the voxel at fixed world x sits at turn(x) in the moving volume.
            var found = run.Transform.ToRas();
            double about = Rigid3D.AngleAboutAnteriorDegrees(found);
            double offAxis = Rigid3D.AngleBetweenDegrees(found, Rigid3D.AboutAnterior(about));
            double error = Rigid3D.AngleBetweenDegrees(found, turn);
            double distance = Rigid3D.MeanDistanceMm(found, turn, tissue);
            double r = ElastixSupport.Pearson(run.Result, truth);
            angles[degrees] = about;
            output.WriteLine($"turned {degrees}°: elastix ended at {about:0.###}° about the anterior axis (off-axis {offAxis:0.###}°), " +
                $"{error:0.###}° and {distance:0.####} mm (mean over tissue) from the true map; result vs truth r = {r:0.####}; {run.Seconds:0.0} s");
            if (degrees == 30)
            {
                Assert.True(error <= 1, $"a 30° turn should be recovered within 1°; elastix is {error:0.###}° off (ended at {about:0.###}°)");
                Assert.True(distance <= 0.02, $"a 30° turn should be recovered within one full-resolution voxel (0.02 mm); mean tissue distance {distance:0.####} mm");
                Assert.True(r >= 0.95, $"after recovering the 30° turn the result should match the truth (r {r:0.####})");
            }
            else
            {
                // Expected to fail to recover: the point of this check is that it does NOT converge from a quarter turn.
                Assert.True(error > 10, $"a 90° turn was unexpectedly recovered (elastix ended at {about:0.###}°); if this now passes, revisit the note on choosing the output frame");
            }
        }
        output.WriteLine($"summary: 30° → {angles[30]:0.##}°, 90° → {angles[90]:0.##}°");
    }

    /// <summary>
    /// The main hand-off check: the demo series rebuilt by <c>stackbuild build</c> in the truth's frame
    /// (<c>--reference N --rotate DEG [--mirror]</c>, with N's turn and mirror read from truth.json as a user would
    /// judge them by eye), registered rigidly onto demo-series/truth.nii.gz by elastix, lands where the ground
    /// truth says it should. "Where it should" is our own best rigid fit of the truth onto the build, from
    /// truth.json's plane_to_image and the sidecar's matrices (no image data involved).
    /// </summary>
    [Fact]
    public void RebuiltDemoSeriesRegistersOntoTheTruthWhereTheTruthSaysItBelongs()
    {
        var truthSeries = SeriesTruth.Read(Path.Combine(RepositoryPaths.DemoSeries, "truth.json"));
        // The reference: an intact section mounted face up, nearest the middle of the series.
        var flags = JsonDocument.Parse(File.ReadAllText(Path.Combine(RepositoryPaths.DemoSeries, "truth.json"))).RootElement
            .GetProperty("sections").EnumerateArray()
            .Where(e => !e.GetProperty("lost").GetBoolean() && !e.GetProperty("torn").GetBoolean() && !e.GetProperty("excluded").GetBoolean())
            .Select(e => e.GetProperty("number").GetInt32()).ToHashSet();
        int reference = truthSeries.Sections.Keys.Where(flags.Contains).OrderBy(n => Math.Abs(n - 30)).First();
        var referencePlaneToImage = truthSeries.Sections[reference].PlaneToImage;
        // Section N as scanned is the truth plane turned by plane_to_image; --rotate (clockwise as displayed, the
        // same sense as Transform2D's angle) undoes the turn, --mirror the face-down mounting.
        double rotate = -referencePlaneToImage.RotationDegrees;
        bool mirror = referencePlaneToImage.IsMirrored;

        var clock = Stopwatch.StartNew();
        var volumePath = _temp.File("rebuilt.nii.gz");
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        string[] args = ["build", RepositoryPaths.DemoSeries, "-o", volumePath, "--work-size", "256",
            "--reference", reference.ToString(CultureInfo.InvariantCulture), "--rotate", rotate.ToString("R", CultureInfo.InvariantCulture), .. mirror ? new[] { "--mirror" } : []];
        int code = Cli.Program.Run(args, stdout, stderr);
        Assert.True(code == 0, $"build failed: {stderr}");
        double buildSeconds = clock.Elapsed.TotalSeconds;

        var record = JsonSerializer.Deserialize<BuildRecord>(File.ReadAllText(_temp.File("rebuilt.json")))!;
        var built = NiftiFile.Read(volumePath).ToVolume();
        var truth = NiftiFile.Read(TruthVolumePath).ToVolume();
        // Plane k of the truth is section k + 1 (truth.json); the build puts section n on plane n − 1 when the
        // series starts at section 1 with one plane per section, so the planes correspond one to one.
        Assert.Equal(truth.Nz, built.Nz);
        Assert.All(record.Sections, s => Assert.Equal(s.Number - 1, s.ZIndex));
        Assert.Equal(reference, record.ReferenceSection);

        var expected = BestRigidFit(record, truthSeries, truth.Affine, built.Affine, out double rmsMm, out int fitted);
        output.WriteLine($"build {buildSeconds:0.0} s: {string.Join(' ', args[3..])} → {built.Nx}×{built.Ny}×{built.Nz} ({record.Frame?.Describe()}); " +
            $"best rigid fit over {fitted} sections turns {Rigid3D.AngleBetweenDegrees(expected, Affine.Identity):0.###}°, " +
            $"shifts ({expected[0, 3]:0.####}, {expected[1, 3]:0.####}, {expected[2, 3]:0.####}) mm, rms residual {rmsMm:0.####} mm");
        // The frame options did their job before any registration: the build faces the truth's way.
        Assert.True(Rigid3D.AngleBetweenDegrees(expected, Affine.Identity) <= 5, "the build in the reference's corrected frame should face the truth's way");

        var truthHalf = ElastixSupport.HalveInPlane(truth);
        var builtHalf = ElastixSupport.HalveInPlane(built);
        var fixedPath = _temp.File("truth-half.nii");
        var movingPath = _temp.File("rebuilt-half.nii");
        NiftiFile.Write(fixedPath, truthHalf);
        NiftiFile.Write(movingPath, builtHalf);
        var run = ElastixSupport.RegisterRigid(fixedPath, movingPath, _temp.File("elastix-rebuilt"));
        var found = run.Transform.ToRas();

        var tissue = TissuePoints(truth, 0.1f);
        double angle = Rigid3D.AngleBetweenDegrees(found, expected);
        double inPlane = Rigid3D.AngleAboutAnteriorDegrees(found) - Rigid3D.AngleAboutAnteriorDegrees(expected);
        double distance = Rigid3D.MeanDistanceMm(found, expected, tissue);
        // The result image is the rebuilt volume on the truth's grid; its best possible counterpart is the same
        // volume resampled (by us, trilinear) through the expected map. Both are compared with the truth inside
        // the truth's tissue (stain density above 0.05), where brightfield grey falls as density rises, so r is
        // negative; outside it the slide, the empty surround and the crop edge would dominate the measure.
        var inTissue = truthHalf.Voxels.Select(v => v > 0.05f).ToArray();
        double rFound = ElastixSupport.Pearson(run.Result, truthHalf, inTissue);
        double rBest = ElastixSupport.Pearson(ElastixSupport.Resample(builtHalf, truthHalf, expected), truthHalf, inTissue);
        // Our own resampling through elastix's transform (as parsed and converted to RAS) must reproduce elastix's
        // result image: a check of the parameter reading and the LPS/RAS conversion on an oblique transform.
        double rOurs = ElastixSupport.Pearson(ElastixSupport.Resample(builtHalf, truthHalf, found), truthHalf, inTissue);
        double voxelMm = truth.Affine.VoxelSizes.I;
        output.WriteLine($"elastix {run.Seconds:0.0} s: {angle:0.###}° from the expected rotation ({inPlane:0.###}° of it about the section normal), " +
            $"{distance:0.####} mm ({distance / voxelMm:0.##} full-resolution in-plane voxels) from the expected map (mean over {tissue.Count} tissue points); " +
            $"r(result, truth) = {rFound:0.####}, r(best fit, truth) = {rBest:0.####}, ratio {rFound / rBest:0.####}; r(our resampling through elastix's map) = {rOurs:0.####}; total {clock.Elapsed.TotalSeconds:0.0} s");

        Assert.True(Math.Abs(rOurs - rFound) <= 0.01, $"our resampling through elastix's transform gives r {rOurs:0.####}, elastix's own result {rFound:0.####}");
        // The turn that the frame options correct is recovered: the in-plane angle agrees with the truth.
        Assert.True(Math.Abs(inPlane) <= 1, $"elastix's in-plane rotation is {inPlane:0.###}° from the expected one (limit 1°)");
        // The hand-off criterion: after registration the rebuilt volume matches the truth within 5 % of what the
        // best rigid placement achieves (the 5 % is this project's choice).
        Assert.True(Math.Abs(rFound) >= 0.95 * Math.Abs(rBest), $"|r| after registration {Math.Abs(rFound):0.####} is more than 5 % below the best fit's {Math.Abs(rBest):0.####}");
        // Where elastix puts the tissue differs from the best rigid fit by less than the rebuilt sections
        // themselves scatter about one rigid body (the build's own residual), so the two cannot be told apart.
        Assert.True(distance <= rmsMm, $"elastix puts the tissue {distance:0.####} mm from the best rigid fit, more than the sections' own scatter {rmsMm:0.####} mm");
        // Out of plane elastix settles on a tilt of about 1° about each in-plane axis that the placement-based fit does not
        // show (measured 1.44–1.54° in all, also with 500 iterations and 8192 samples). It is the chain's drift: the same
        // series built with the template (no drift) comes out of elastix within 0.05° of identity
        // (TheTemplateGuidedBuildNeedsNoRegistration). The bound of 2° is set from those runs, not from a standard.
        Assert.True(angle <= 2, $"elastix's rotation is {angle:0.###}° from the expected one (limit 2°, see the comment)");
    }

    [Fact]
    public void TheTemplateGuidedBuildNeedsNoRegistration()
    {
        // Outside check with elastix: the demo built against its blockface template is in the template's (the truth's)
        // world already, so a rigid registration onto the truth volume must find (almost) nothing to do. Measured
        // 2026-12-02: 0.047° and 2 µm. This also places the ~1.5° tilt of the chained build (above) on the chain's drift.
        var truth = ElastixSupport.HalveInPlane(NiftiFile.Read(TruthVolumePath).ToVolume());
        var fixedPath = _temp.File("truth-half-guided.nii");
        NiftiFile.Write(fixedPath, truth);
        var build = BuildPipeline.Run(new BuildOptions
        {
            Input = RepositoryPaths.DemoSeries,
            Template = new TemplateOptions { Path = Path.Combine(RepositoryPaths.DemoSeries, "blockface.nii.gz") },
        });
        var volumePath = _temp.File("guided.nii.gz");
        StackBuild.Write.BuildWriter.Write(StackBuild.Write.BuildReview.Review(build), StackBuild.Write.BuildOutputPaths.For(volumePath));
        var movingPath = _temp.File("guided-half.nii");
        NiftiFile.Write(movingPath, ElastixSupport.HalveInPlane(NiftiFile.Read(volumePath).ToVolume()));
        var found = ElastixSupport.RegisterRigid(fixedPath, movingPath, _temp.File("elastix-guided")).Transform.ToRas();
        double angle = Rigid3D.AngleBetweenDegrees(found, Affine.Identity);
        double shift = Math.Sqrt(found[0, 3] * found[0, 3] + found[1, 3] * found[1, 3] + found[2, 3] * found[2, 3]);
        output.WriteLine($"elastix on the template-guided build: {angle:0.###}° from identity ({Rigid3D.AngleAboutAnteriorDegrees(found):0.###}° about the section normal), shift {shift * 1000:0.#} µm");
        // Bounds (this project's): a tenth of the chained build's tilt, and one full-resolution voxel (20 µm).
        Assert.True(angle <= 0.15, $"elastix turns the guided build by {angle:0.###}°");
        Assert.True(shift <= 0.02, $"elastix shifts the guided build by {shift * 1000:0.#} µm");
    }

    /// <summary>
    /// The rigid map truth world → built world that best fits where the build put every section: for each placed
    /// section (of the majority's handedness) a 5 × 5 grid of truth-plane points, taken through truth.json's
    /// plane_to_image and the sidecar's matrix to output voxels, then through the volume's affine;
    /// fitted in 3D, so a drift that grows along the series (a shear of the stack) shows as the tilt that best
    /// absorbs it. <paramref name="rmsMm"/> is how far the sections are from one rigid body.
    /// </summary>
    private static Affine BestRigidFit(BuildRecord record, SeriesTruth truth, Affine truthAffine, Affine builtAffine, out double rmsMm, out int fitted)
    {
        var maps = record.Sections
            .Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed && s.Matrix is not null && truth.Sections.ContainsKey(s.Number))
            .Select(s => (s.ZIndex, Map: truth.Sections[s.Number].PlaneToImage.Then(Transform2D.FromRows(s.Matrix!))))
            .ToList();
        bool mirrored = maps.Count(m => m.Map.IsMirrored) * 2 > maps.Count;
        var src = new List<(double X, double Y, double Z)>();
        var dst = new List<(double X, double Y, double Z)>();
        fitted = 0;
        foreach (var (k, map) in maps.Where(m => m.Map.IsMirrored == mirrored))
        {
            fitted++;
            for (int a = 0; a < 5; a++)
            for (int b = 0; b < 5; b++)
            {
                double x = truth.PlaneWidth * (0.1 + 0.2 * a), y = truth.PlaneHeight * (0.1 + 0.2 * b);
                src.Add(truthAffine.Apply(x, y, k));
                var q = map.Apply(x, y);
                dst.Add(builtAffine.Apply(q.X, q.Y, k));
            }
        }
        return Rigid3D.FitRigid(src, dst, out rmsMm);
    }

    /// <summary>
    /// nibabel (Debian python3-nibabel), reading a built volume, reports the axis codes the build was asked for:
    /// <c>nibabel.aff2axcodes</c> on the affine nibabel itself takes from the header (sform, else qform).
    /// </summary>
    [Theory]
    [InlineData("RIP")]
    [InlineData("LPS")]
    [InlineData("ASR")]
    public void NibabelReportsTheRequestedAxisCodes(string axes)
    {
        var series = Directory.CreateDirectory(_temp.File("series")).FullName;
        for (int n = 1; n <= 3; n++)
        {
            using var image = new SixLabors.ImageSharp.Image<SixLabors.ImageSharp.PixelFormats.L8>(24, 16, new SixLabors.ImageSharp.PixelFormats.L8(220));
            for (int y = 4; y < 10; y++) for (int x = 5 + n; x < 14 + n; x++) image[x, y] = new SixLabors.ImageSharp.PixelFormats.L8(60);
            SixLabors.ImageSharp.ImageExtensions.SaveAsPng(image, Path.Combine(series, $"s_{n:000}.png"));
        }
        File.WriteAllText(Path.Combine(series, "manifest.csv"), "#! pixel_size_um = 10\n#! spacing_um = 40\nsection,file\n1,s_001.png\n2,s_002.png\n3,s_003.png\n");
        var volumePath = _temp.File($"axes-{axes}.nii.gz");
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = Cli.Program.Run(["build", series, "-o", volumePath, "--axes", axes, "--no-align"], stdout, stderr);
        Assert.True(code == 0, $"build failed: {stderr}");

        const string script = "import sys\ntry:\n    import nibabel\nexcept ImportError as e:\n    print(e, file=sys.stderr); sys.exit(3)\n" +
            "img = nibabel.load(sys.argv[1])\nprint(''.join(nibabel.aff2axcodes(img.affine)))";
        if (!File.Exists(NiftiPython.Python)) Assert.Fail($"{NiftiPython.Python} is missing: install python3 and python3-nibabel");
        var (exit, codes, err) = NiftiPython.Process(NiftiPython.Python, ["-c", script, volumePath]);
        Assert.True(exit == 0, exit == 3 ? $"nibabel is missing ({err.Trim()}): install the Debian package python3-nibabel" : $"python failed: {err}");
        output.WriteLine($"--axes {axes}: nibabel aff2axcodes {codes.Trim()}, our reader {NiftiFile.Read(volumePath).Affine.AxisCodes}");
        Assert.Equal(axes, codes.Trim());
    }

    /// <summary>Tissue voxel centres (world mm) of a volume, every few voxels: where a map's errors matter.</summary>
    private static List<(double X, double Y, double Z)> TissuePoints(Volume v, float threshold, int step = 3)
    {
        var points = new List<(double, double, double)>();
        for (int k = 0; k < v.Nz; k += step)
        for (int j = 0; j < v.Ny; j += step)
        for (int i = 0; i < v.Nx; i += step)
            if (v[i, j, k] > threshold) points.Add(v.Affine.Apply(i, j, k));
        Assert.True(points.Count > 100, $"only {points.Count} tissue points above {threshold}");
        return points;
    }
}
