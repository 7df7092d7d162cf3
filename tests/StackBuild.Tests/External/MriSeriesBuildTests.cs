using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using StackBuild.Evaluate;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Pipeline;
using StackBuild.Solve;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// A series of scans cut from a real MRI volume (the Colin27 "ch2" template, Debian mricron-data): axial planes
/// 40, 42, …, 118 (1 mm voxels, so 2 mm apart), each moved by a random rigid map (any angle, shift up to ±20 px, three
/// mounted face down) and written as 16-bit PNG scans with a manifest, plus a truth.json of the maps applied. Built
/// three times through the whole pipeline: plain neighbour chain, smoothing prior, and guided by a template made from
/// ch2 by nibabel (2× coarser on every axis, square-root contrast, noise; tests/tools/template_world_check.py).
/// </summary>
public sealed class MriSeriesBuilds : IDisposable
{
    public const int Sections = 40;
    public const int FirstTemplatePlane = 40; // ch2 plane k of section 1; section n is at k = 40 + 2 (n − 1)
    public string Folder { get; } = Directory.CreateTempSubdirectory("sb-mriseries-").FullName;
    public string TemplatePath => Path.Combine(Folder, "template.nii.gz");
    public string GuidedVolumePath => Path.Combine(Folder, "guided.nii.gz");
    public string TruthPath => Path.Combine(Folder, "truth.json");
    public BuildResult Chain { get; }
    public BuildResult Smoothed { get; }
    public BuildResult Guided { get; }
    public double[] Seconds { get; } = new double[4];
    public int[] MirroredSections { get; }

    public MriSeriesBuilds()
    {
        var watch = Stopwatch.StartNew();
        MirroredSections = WriteSeries(Folder, TruthPath);
        NiftiPython.Run("template_world_check.py", "make", RegisterMriTests.TemplatePath, TemplatePath, "5");
        Seconds[0] = watch.Elapsed.TotalSeconds; watch.Restart();
        Chain = BuildPipeline.Run(new BuildOptions { Input = Folder, Solver = PlacementSolver.Chain });
        Seconds[1] = watch.Elapsed.TotalSeconds; watch.Restart();
        Smoothed = BuildPipeline.Run(new BuildOptions { Input = Folder, Solver = PlacementSolver.Smoothing, Smoothing = new SmoothingOptions { Strength = 0 } });
        Seconds[2] = watch.Elapsed.TotalSeconds; watch.Restart();
        // The template's planes are 2×2 blocks of ch2 planes with the affine moved to the block centres (template_world_check.py
        // make): ch2 plane k lies at template plane (k − 0.5) / 2, and the 2 mm section spacing is one template plane.
        Guided = BuildPipeline.Run(new BuildOptions
        {
            Input = Folder,
            Template = new TemplateOptions { Path = TemplatePath, CutAxis = 'k', FirstPlane = (FirstTemplatePlane - 0.5) / 2 },
        });
        Seconds[3] = watch.Elapsed.TotalSeconds;
        StackBuild.Write.BuildWriter.Write(StackBuild.Write.BuildReview.Review(Guided), StackBuild.Write.BuildOutputPaths.For(GuidedVolumePath));
    }

    public void Dispose()
    {
        try { Directory.Delete(Folder, true); } catch (IOException) { }
    }

    /// <summary>Writes scans, manifest and truth; returns the numbers of the sections mounted face down.</summary>
    private static int[] WriteSeries(string folder, string truthPath)
    {
        var v = RegisterMriTests.Template();
        var rng = new Random(20261203);
        var mirrored = new HashSet<int> { 9, 22, 31 }; // three sections mounted face down
        var lines = new List<string> { "#! pixel_size_um = 1000", "#! spacing_um = 2000", "section,file" };
        var truthSections = new List<object>();
        int width = 0, height = 0;
        for (int n = 1; n <= Sections; n++)
        {
            // The marking track (a stripe beside the right edge) lets mirrored mounting be told, as in RegisterMriTests.
            var plane = RegisterMriTests.Section(v, FirstTemplatePlane + 2 * (n - 1), marker: true);
            width = plane.Width; height = plane.Height;
            double c = (plane.Width - 1) / 2.0;
            double angle = rng.NextDouble() * 360 - 180, dx = rng.NextDouble() * 40 - 20, dy = rng.NextDouble() * 40 - 20;
            var move = (mirrored.Contains(n) ? Transform2D.MirrorX(c) : Transform2D.Identity)
                .Then(Transform2D.Rotation(angle, c, c)).Then(Transform2D.Translation(dx, dy));
            var scan = Resampler.Warp(plane, move.Inverse(), plane.Width, plane.Height, 0f);
            string name = $"s{n:00}.png";
            SectionImageTestFiles.Gray16Png(Path.Combine(folder, name), scan.Width, scan.Height,
                (x, y) => (ushort)Math.Clamp(Math.Round(scan[x, y] * 60000), 0, 65535));
            lines.Add($"{n},{name}");
            truthSections.Add(new Dictionary<string, object>
            {
                ["number"] = n, ["file"] = name, ["mirrored"] = mirrored.Contains(n),
                ["ch2_plane"] = FirstTemplatePlane + 2 * (n - 1), ["plane_to_image"] = move.ToRows(),
            });
        }
        File.WriteAllLines(Path.Combine(folder, "manifest.csv"), lines);
        var truth = new Dictionary<string, object>
        {
            ["description"] = "axial planes of ch2.nii.gz (mricron-data) on a 300x300 canvas, moved by random rigid maps",
            ["options"] = new Dictionary<string, object> { ["width"] = width, ["height"] = height, ["pixel_size_um"] = 1000.0 },
            ["sections"] = truthSections,
        };
        File.WriteAllText(truthPath, JsonSerializer.Serialize(truth));
        return [.. mirrored.Order()];
    }
}

/// <summary>
/// Drift correction through the whole build on a series cut from a real MRI volume (<see cref="MriSeriesBuilds"/>),
/// measured against the maps the test applied (<see cref="TruthEvaluation"/>).
/// </summary>
public sealed class MriSeriesBuildTests(MriSeriesBuilds builds, ITestOutputHelper output) : IClassFixture<MriSeriesBuilds>
{
    private string Line(string name, EvaluationResult e) =>
        string.Create(CultureInfo.InvariantCulture,
            $"{name,-12} drift rms {e.DriftRmsPx:0.###} px, max {e.DriftMaxPx:0.###}; placement error median {e.ErrorPx.Median:0.###} px, " +
            $"p95 {e.ErrorPx.P95:0.###}, max {e.ErrorPx.Max:0.###}; pairwise median {e.PairErrorPx.Median:0.###} px; mirror wrong {e.MirrorWrong}; evaluated {e.Evaluated}");

    [Fact]
    public void TheTemplateTakesOutTheChainsDriftOnAnMriSeries()
    {
        var truth = SeriesTruth.Read(builds.TruthPath);
        var chain = TruthEvaluation.Evaluate(builds.Chain.Record, truth);
        var smoothed = TruthEvaluation.Evaluate(builds.Smoothed.Record, truth);
        var guided = TruthEvaluation.Evaluate(builds.Guided.Record, truth);
        output.WriteLine($"series + template {builds.Seconds[0]:0.0} s; builds: chain {builds.Seconds[1]:0.0} s, smoothing {builds.Seconds[2]:0.0} s, template {builds.Seconds[3]:0.0} s");
        foreach (var (name, e) in new[] { ("chain", chain), ("smoothing 0", smoothed), ("template", guided) })
            output.WriteLine(Line(name, e));
        var frame = builds.Guided.Record.Frame!.Template!;
        output.WriteLine($"template: first plane {frame.FirstPlane}, measured {frame.Measured}, outliers {frame.Outliers}, chain steps [{string.Join(", ", frame.ChainSteps)}]");
        Assert.Empty(frame.ChainSteps); // the chain drifts fast at the top of the brain, but smoothly: no false step

        foreach (var b in new[] { builds.Chain, builds.Smoothed, builds.Guided })
            Assert.Equal(MriSeriesBuilds.Sections, b.Record.Sections.Count(s => s.Status == SectionOutcome.Aligned));
        Assert.Equal(0, guided.MirrorWrong);
        // Targets of the issue: low-frequency drift (moving average over 9 sections after one global fit) at most a third
        // of plain chaining's; median absolute error ≤ 1 px (output pixels, 1 mm here).
        Assert.True(guided.DriftRmsPx <= chain.DriftRmsPx / 3, $"template drift {guided.DriftRmsPx} px, chain {chain.DriftRmsPx} px");
        Assert.True(guided.ErrorPx.Median <= 1, $"median placement error {guided.ErrorPx.Median} px");
        // Clean MRI planes 2 mm apart already make the chain drift (measured 2026-12-02: rms 3.58 px, max 8.19 px), so no
        // extra realism (intensity changes, tears) was needed; this guards that the comparison keeps meaning something.
        Assert.True(chain.DriftRmsPx > 2, $"the chain drifts only {chain.DriftRmsPx} px: the comparison means nothing");
        // The neighbour detail is kept: sections relative to each other no worse than the chain's (+0.2 px, this project's
        // bound, as in DriftCorrectionTests).
        Assert.True(guided.PairErrorPx.Median <= chain.PairErrorPx.Median + 0.2, $"pairwise median {guided.PairErrorPx.Median} vs {chain.PairErrorPx.Median}");
        Assert.True(smoothed.PairErrorPx.Median <= chain.PairErrorPx.Median + 0.2, $"pairwise median {smoothed.PairErrorPx.Median} vs {chain.PairErrorPx.Median}");
        // The reference-free solve does not meet the drift target (≤ 1/3 of the chain's; the chain's drift is slow link
        // error, not noise, TheChainsDriftIsBiasedLinkErrorNotNoise), but must not amplify it: at full weight its
        // second-neighbour pairs raised the drift to 4.34 px (measured 2026-12-02); their route closures are slow (share
        // above the limit), so they are weighted down. Bound: 5 % over the chain (this project's; measured 0.4 %).
        var closure = builds.Smoothed.Record.Parameters.RouteClosure!;
        output.WriteLine($"route closures: slow share {closure.SlowShare:0.###}, limit {closure.Limit:0.###}, second-neighbour weight {closure.SecondNeighbourWeight}");
        Assert.Equal(0.01, closure.SecondNeighbourWeight);
        Assert.True(smoothed.DriftRmsPx <= 1.05 * chain.DriftRmsPx, $"smoothing drift {smoothed.DriftRmsPx} px, chain {chain.DriftRmsPx} px");
    }

    [Fact]
    public void ASectionStainedDifferentlyIsPlacedByTheTemplateWhereTheChainFails()
    {
        // Section 20 rescanned with a non-monotone change of contrast (0.5 − 0.5·cos 4πv: a different stain). Measured
        // 2026-12-02: the neighbour chain cannot place it (status failed without a template); normalised mutual information
        // still finds it on its template slice, so the guided build places it by that match alone (route 'template').
        var folder = Directory.CreateTempSubdirectory("sb-mristain-").FullName;
        try
        {
            foreach (var file in Directory.GetFiles(builds.Folder).Where(f => f.EndsWith(".png") || f.EndsWith(".csv") || f.EndsWith("truth.json")))
                File.Copy(file, Path.Combine(folder, Path.GetFileName(file)));
            var path = Path.Combine(folder, "s20.png");
            using (var image = SixLabors.ImageSharp.Image.Load<SixLabors.ImageSharp.PixelFormats.L16>(path))
            {
                var values = new ushort[image.Width, image.Height];
                for (int y = 0; y < image.Height; y++) for (int x = 0; x < image.Width; x++) values[x, y] = image[x, y].PackedValue;
                SectionImageTestFiles.Gray16Png(path, image.Width, image.Height,
                    (x, y) => (ushort)Math.Round((0.5 - 0.5 * Math.Cos(4 * Math.PI * values[x, y] / 65535.0)) * 60000));
            }
            var build = BuildPipeline.Run(new BuildOptions
            {
                Input = folder,
                Template = new TemplateOptions { Path = builds.TemplatePath, CutAxis = 'k', FirstPlane = (MriSeriesBuilds.FirstTemplatePlane - 0.5) / 2 },
            });
            var section = build.Record.Sections.Single(s => s.Number == 20);
            output.WriteLine($"section 20: status {section.Status}, route {section.Route}, template note: {section.Template?.Note}");
            Assert.Equal(SectionOutcome.Aligned, section.Status);
            Assert.Equal(LinkRoute.Template, section.Route);
            Assert.True(section.Template!.PlacedByTemplate);
            Assert.Contains("placed by its own template match alone", section.Template.Note);
            var evaluation = TruthEvaluation.Evaluate(build.Record, SeriesTruth.Read(Path.Combine(folder, "truth.json")));
            var error = evaluation.Sections.Single(e => e.Number == 20);
            output.WriteLine($"section 20: error {error.ErrorPx:0.###} px, rotation {error.RotationErrorDegrees:0.###}°; build median {evaluation.ErrorPx.Median:0.###} px");
            Assert.False(error.MirrorWrong);
            Assert.True(error.ErrorPx < 1, $"section 20 is {error.ErrorPx} px off");
            Assert.Equal(MriSeriesBuilds.Sections, build.Record.Sections.Count(s => s.Status == SectionOutcome.Aligned));
            // Its error estimate is that of one template match (the neighbours' RMS misfit), with no chain link in it.
            var estimate = Uncertainty.Annotate(build.Record).Sections.Single(s => s.Number == 20).EstimatedErrorUm;
            output.WriteLine($"section 20: estimated error {estimate:0.#} µm, true {error.ErrorUm:0.#} µm");
            Assert.NotNull(estimate);
            Assert.InRange(estimate!.Value, 1, 1000); // more than nothing, less than one 1 mm pixel
            Assert.Null(section.DriftCorrectionUm);
        }
        finally
        {
            try { Directory.Delete(folder, true); } catch (IOException) { }
        }
    }

    [Fact]
    public void TheChainsDriftIsBiasedLinkErrorNotNoise()
    {
        // Why the reference-free drift target (≤ 1/3 of the chain's) is not met: the chain's link errors against the truth
        // are not registration noise. On this series they are biased: every link errs the same way on average (0.1° and
        // 0.38 px per link), so the same errors re-chained in any order (DriftSurrogate) drift as much as the chain or more,
        // while unbiased independent errors of the same spread drift far less. Averaging more pairs removes noise, not bias.
        var split = DriftSurrogate.Measure(builds.Chain.Record, SeriesTruth.Read(builds.TruthPath));
        output.WriteLine($"chain drift rms {split.Chain.DriftRmsPx:0.###} px; same link errors shuffled: mean {split.ShuffledDriftRmsPx:0.###} px, p95 {split.ShuffledDriftP95Px:0.###} px ({DriftSurrogate.Shuffles} orders)");
        output.WriteLine($"unbiased independent errors of the same spread: mean {split.NoiseDriftRmsPx:0.###} px, p95 {split.NoiseDriftP95Px:0.###} px");
        output.WriteLine($"lag-1 autocorrelation of the link shifts: {split.LinkLag1Autocorrelation:0.###}; mean link error {split.MeanLink[0]:0.###}°, ({split.MeanLink[1]:0.###}, {split.MeanLink[2]:0.###}) px");
        Assert.True(split.Chain.DriftRmsPx > split.NoiseDriftP95Px, "the chain drifts no more than unbiased independent link errors would");
        Assert.True(split.ShuffledDriftRmsPx > 2 * split.NoiseDriftP95Px, "the mean link error is not what makes the drift");
    }

    [Fact]
    public void TheGuidedBuildLiesOnTheMriInWorldSpace()
    {
        // Outside check (nibabel reads both files, SciPy samples ch2 at every built voxel's world position): the guided
        // build is in the template's frame, and the template's world is ch2's, so it must overlay ch2 with no registration.
        // The scans show tissue bright, as ch2 does: r is strongly positive when aligned.
        var check = JsonDocument.Parse(NiftiPython.Run("template_world_check.py", "world", builds.GuidedVolumePath, RegisterMriTests.TemplatePath)).RootElement;
        double inside = check.GetProperty("inside").GetDouble(), r = check.GetProperty("r").GetDouble();
        output.WriteLine($"inside ch2: {inside:P1}; r = {r:0.####}; axes built {check.GetProperty("built_axes")}, ch2 {check.GetProperty("truth_axes")}");
        output.WriteLine($"built grid {builds.Guided.Volume.Nx}×{builds.Guided.Volume.Ny}×{builds.Guided.Volume.Nz} voxels; ch2 is 181×217×181");
        // Not all built voxels can lie inside ch2: the marking track beside each section's right edge lies beyond ch2's
        // field for the widest planes, and the grid reaches over it (measured 2026-12-02: 192 voxels along x against ch2's
        // 181, 93.3 % inside; the outside share was all along x and y beyond ch2's edges). 0.9 leaves room for that.
        Assert.True(inside > 0.9, $"only {inside:P1} of the built voxels lie inside ch2");
        Assert.True(r > 0.9, $"guided build against ch2 in world space: r = {r}");
    }
}
