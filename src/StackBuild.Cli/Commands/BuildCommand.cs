using System.Globalization;
using System.CommandLine;
using System.Text.Json;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Pipeline;
using StackBuild.Register;
using StackBuild.Render;
using StackBuild.Series;
using StackBuild.Solve;
using StackBuild.Write;

namespace StackBuild.Cli.Commands;

public static class BuildCommand
{
    public static Command Create(CliOutput console) => Create(console, CliHooks.None);

    internal static Command Create(CliOutput console, CliHooks hooks)
    {
        var series = new Argument<string>("series") { Description = "Folder of section images (with an optional manifest.csv), or a manifest file" };
        var output = new Option<string>("--output", "-o") { Description = "Output volume, .nii.gz or .nii (NIfTI-1), or .ome.zarr (an OME-Zarr folder: chunked, with coarser levels); the sidecar .json and the report .report.html are written beside it", Required = true };
        var manifest = new Option<string?>("--manifest") { Description = "Manifest CSV to use instead of SERIES/manifest.csv" };
        var pixelSize = new Option<double?>("--pixel-size") { Description = "Input pixel size in µm (overrides the manifest)" };
        var spacing = new Option<double?>("--spacing") { Description = "Distance between consecutive section numbers in µm (overrides the manifest)" };
        var axes = new Option<string>("--axes") { Description = "Axis codes for (image right, image down, increasing section number), e.g. RIP", DefaultValueFactory = _ => AxisCodes.Default.Code };
        var outPixel = new Option<double?>("--output-pixel-size") { Description = "In-plane voxel size of the volume in µm (default: the input pixel size, coarsened so a plane is at most 2048 voxels)" };
        var voxelSize = new Option<double?>("--voxel-size") { Description = "Voxel size of the volume in µm: the plane spacing (planes between sections interpolated like the gaps) and, unless --output-pixel-size is given, the in-plane size" };
        var channel = new Option<string>("--channel") { Description = "How colour images become gray: luminance, red, green or blue", DefaultValueFactory = _ => "luminance" };
        var interpolation = new Option<string>("--interpolation") { Description = "Resampling: bilinear or bicubic", DefaultValueFactory = _ => "bilinear" };
        var smoothing = new Option<double?>("--smoothing") { Description = "Solve all placements at once from every first- and second-neighbour pair, with outliers set aside, instead of the plain neighbour chain (the default): the smoothness strength (0 = pairs only; a negative value keeps the plain chain). It does not remove slow drift (--template does); where pairs two sections apart disagree systematically it stays close to the plain chain" };
        var fill = new Option<string>("--fill") { Description = "Fill gap, excluded and failed planes of an aligned build from their neighbours: flow (optical-flow interpolation), linear or none", DefaultValueFactory = _ => "flow" };
        var reference = new Option<int?>("--reference") { Description = "Section number whose frame, as it lay on its slide, the volume takes (default: the confident section nearest the middle of the stack)" };
        var rotate = new Option<double>("--rotate") { Description = "Turn the whole volume in the section plane by this many degrees, clockwise as displayed", DefaultValueFactory = _ => 0 };
        var mirror = new Option<bool>("--mirror") { Description = "Mirror the whole volume left-right (after --rotate)" };
        var upright = new Option<bool>("--upright") { Description = "Turn the volume so the specimen's midline (symmetry axis) is vertical; refused when the sections are not symmetric enough" };
        var noCrop = new Option<bool>("--no-crop") { Description = "Keep every section's whole image in the grid instead of cropping to the tissue" };
        var margin = new Option<double>("--margin") { Description = "Margin around the tissue in µm when cropping", DefaultValueFactory = _ => FrameOptions.DefaultMarginUm };
        var centre = new Option<string>("--centre") { Description = "World position X,Y,Z in mm given to the tissue's centre", DefaultValueFactory = _ => "0,0,0" };
        var template = new Option<string?>("--template") { Description = "A template volume (NIfTI-1: blockface stack or MRI of the specimen) that guides the drift and gives the volume its frame" };
        var templateAxis = new Option<string>("--template-axis") { Description = "The template's voxel axis the sections were cut along: i, j or k", DefaultValueFactory = _ => "k" };
        var templateFirst = new Option<double?>("--template-first-plane") { Description = "Template plane index of the first section (default: the series centred on the template)" };
        var templateReverse = new Option<bool>("--template-reverse") { Description = "Higher section numbers lie at lower template planes" };
        var templateGrid = new Option<bool>("--template-grid") { Description = "Put the volume on the template's own voxels (its voxel size and lattice, cropped to the tissue) instead of the sections' pixel size and spacing" };
        var json = new Option<bool>("--json") { Description = "Print a machine-readable summary instead of text" };
        var verbose = new Option<bool>("--verbose") { Description = "Also print, on stderr, what each stage of the build cost: wall and CPU time, memory allocated, managed heap and peak resident memory" };
        var noAlign = new Option<bool>("--no-align") { Description = "Place the sections centred without aligning them (the series as scanned)" };
        var workSize = new Option<int>("--work-size") { Description = "Long side in pixels at which sections are registered", DefaultValueFactory = _ => 512 };
        var cacheFolder = new Option<string?>("--cache") { Description = $"Folder where registered pairs are kept for the next build of the same sections with the same registration options (default: {PairCacheFolder.DefaultName} beside the output; it may be deleted at any time)" };
        var noCache = new Option<bool>("--no-cache") { Description = "Register every pair afresh, and keep none for later builds" };
        var minConfidence = new Option<double>("--min-confidence") { Description = "Pairs below this confidence (0–1) are not trusted to place a section", DefaultValueFactory = _ => 0.2 };

        foreach (var (option, name) in new (Option, string)[]
        {
            (pixelSize, "UM"), (spacing, "UM"), (axes, "CODES"), (outPixel, "UM"), (voxelSize, "UM"), (reference, "N"), (rotate, "DEG"),
            (margin, "UM"), (centre, "X,Y,Z"), (template, "VOL.nii.gz"), (templateAxis, "i|j|k"), (templateFirst, "K"),
            (workSize, "PX"), (minConfidence, "0-1"), (cacheFolder, "DIR"), (smoothing, "STRENGTH"), (manifest, "CSV"), (channel, "CHANNEL"),
            (interpolation, "METHOD"), (fill, "METHOD"),
        })
            option.HelpName = name;

        var command = new Command("build", "Rebuild a section series into one NIfTI-1 volume (or OME-Zarr image) with a sidecar of every section's placement.\n\n" +
            "Examples:\n" +
            "  stackbuild build demo-series -o demo-volume.nii.gz\n" +
            "  stackbuild build demo-series -o v.nii.gz --reference 12 --rotate 90 --axes LIP   (frame of section 12, turned)\n" +
            "  stackbuild build demo-series -o v.nii.gz --template blockface.nii.gz             (template guides drift and frame)\n" +
            "  stackbuild build demo-series -o demo-volume.ome.zarr                             (OME-Zarr, for viewers that stream large volumes)")
        {
            series, output, manifest, pixelSize, spacing, axes, reference, upright, rotate, mirror, noCrop, margin, centre,
            template, templateAxis, templateFirst, templateReverse, templateGrid,
            outPixel, voxelSize, channel, interpolation, noAlign, workSize, minConfidence, smoothing, fill, cacheFolder, noCache, json, verbose,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            var total = System.Diagnostics.Stopwatch.StartNew();
            bool Given(Option option) => parse.GetResult(option) is { Implicit: false };
            bool withTemplate = parse.GetValue(template) is not null;
            if (withTemplate && Given(axes))
                throw new InputProblemException(null, "--axes cannot be combined with --template: the axis codes come from the template's affine",
                    "leave out --axes (stackbuild info TEMPLATE shows the template's codes)");
            foreach (var (option, name) in new (Option, string)[] { (templateAxis, "--template-axis"), (templateFirst, "--template-first-plane"), (templateReverse, "--template-reverse"), (templateGrid, "--template-grid") })
                if (!withTemplate && Given(option))
                    throw new InputProblemException(null, $"{name} only applies with --template", $"add --template VOL.nii.gz, or leave out {name}");
            if (Given(margin) && parse.GetValue(noCrop))
                throw new InputProblemException(null, "--margin only applies when the grid is cropped, and --no-crop keeps every whole image", "leave out one of the two");
            if (!AxisCodes.TryParse(parse.GetValue(axes), out var axisCodes, out var axisProblem))
                throw new InputProblemException(null, $"--axes: {axisProblem}", "see README, 'Geometry'");
            if (Given(cacheFolder) && parse.GetValue(noCache))
                throw new InputProblemException(null, "--cache names a folder for registered pairs and --no-cache keeps none", "leave out one of the two");
            var paths = BuildOutputPaths.For(parse.GetValue(output)!);
            paths.CheckWritable();
            if (parse.GetValue(template) is { } templateToCheck) CheckTemplateHeader(console, templateToCheck);
            double? smoothingStrength = FiniteOrNull(parse.GetValue(smoothing), "--smoothing");
            var options = new BuildOptions
            {
                Input = parse.GetValue(series)!,
                Series = new SeriesOptions
                {
                    ManifestPath = parse.GetValue(manifest),
                    PixelSizeUm = Positive(parse.GetValue(pixelSize), "--pixel-size"),
                    SpacingUm = Positive(parse.GetValue(spacing), "--spacing"),
                },
                Axes = axisCodes,
                OutputPixelSizeUm = Positive(parse.GetValue(outPixel), "--output-pixel-size"),
                VoxelSizeUm = Positive(parse.GetValue(voxelSize), "--voxel-size"),
                Channel = ParseChannel(parse.GetValue(channel)!),
                Interpolation = ParseInterpolation(parse.GetValue(interpolation)!),
                Align = !parse.GetValue(noAlign),
                Registration = new RegistrationOptions { WorkSize = WorkSize(parse.GetValue(workSize)) },
                Chain = new ChainOptions { MinConfidence = Fraction(parse.GetValue(minConfidence), "--min-confidence") },
                // A negative strength keeps the plain chain (how the chain was chosen before it was a solver of its own).
                Solver = smoothingStrength is >= 0 ? PlacementSolver.Smoothing : PlacementSolver.Chain,
                Smoothing = new SmoothingOptions { Strength = smoothingStrength is double strength && strength >= 0 ? strength : 0 },
                Fill = ParseFill(parse.GetValue(fill)!),
                Template = parse.GetValue(template) is { } templatePath ? new TemplateOptions
                {
                    Path = templatePath,
                    CutAxis = ParseCutAxis(parse.GetValue(templateAxis)!),
                    FirstPlane = FiniteOrNull(parse.GetValue(templateFirst), "--template-first-plane"),
                    Reverse = parse.GetValue(templateReverse),
                    TemplateGrid = parse.GetValue(templateGrid),
                } : null,
                Frame = new FrameOptions
                {
                    ReferenceSection = parse.GetValue(reference),
                    RotateDegrees = Finite(parse.GetValue(rotate), "--rotate"),
                    Mirror = parse.GetValue(mirror),
                    Upright = parse.GetValue(upright),
                    CropToTissue = !parse.GetValue(noCrop),
                    MarginUm = NonNegative(parse.GetValue(margin), "--margin"),
                    CentreMm = ParsePoint(parse.GetValue(centre)!, "--centre"),
                },
            };
            var clock = parse.GetValue(verbose) ? new StageClock() : null;
            var pairCache = parse.GetValue(noCache) || !options.Align ? null : new PairCacheFolder(parse.GetValue(cacheFolder) ?? PairCacheFolder.DefaultFor(paths.Volume));
            var listed = StageClock.Time(clock, "series", () => SeriesReader.Open(options.Input, options.Series));
            hooks.AfterListing?.Invoke(listed);
            var built = BuildPipeline.Run(options, listed, SectionFiles.Instance, new SyncProgress(console), clock, pairCache);
            pairCache?.Trim();
            var result = StageClock.Time(clock, "review", () => BuildReview.Review(built));
            console.EndProgress();
            result = StageClock.Time(clock, "write", () => BuildWriter.Write(result, paths));
            Report(console, result, paths, parse.GetValue(json), alignRequested: options.Align);
            if (clock is not null) ReportStages(console, clock, total.Elapsed, pairCache);
            return CliOutput.ExitOk;
        }));
        return command;
    }

    /// <summary>
    /// Reads the template's header before any work, so a damaged header is refused at once, and says when its qform and
    /// sform disagree: the sform is used (nifti1.h: method 3 when sform_code &gt; 0), but the other may be what was meant.
    /// </summary>
    private static void CheckTemplateHeader(CliOutput console, string path)
    {
        if (!File.Exists(path) || StackBuild.Template.TemplateVolume.ImageKind(path) is not null) return; // the template loader names these
        var header = StackBuild.Nifti.NiftiFile.ReadHeader(path);
        if (header.QformCode <= 0 || header.SformCode <= 0) return;
        var (q, s) = (header.QformAffine, header.SformAffine);
        double difference = 0;
        for (int r = 0; r < 3; r++) for (int c = 0; c < 4; c++) difference = Math.Max(difference, Math.Abs(q[r, c] - s[r, c]));
        const double toleranceMm = 1e-3; // the qform's quaternion is stored in single precision
        if (difference > toleranceMm)
            console.Out.WriteLine("warning: " + InputProblemException.Format(path,
                $"its qform and sform disagree by up to {difference.ToString("0.###", System.Globalization.CultureInfo.InvariantCulture)} mm; the sform is used, as NIfTI-1 says",
                $"if the qform is the right one, write the template again with matching sform (stackbuild info {path} shows both)"));
    }

    internal sealed class SyncProgress(CliOutput console) : IProgress<string>
    {
        public void Report(string value) => console.Progress(value);
    }

    private static void Report(CliOutput console, BuildResult result, BuildOutputPaths paths, bool json, bool alignRequested)
    {
        var r = result.Record; // reviewed: the estimates and flags the sidecar carries
        var counts = r.Sections.GroupBy(s => s.Status.Word()).ToDictionary(g => g.Key, g => g.Count());
        if (json)
        {
            console.Out.WriteLine(JsonSerializer.Serialize(new
            {
                volume = paths.Volume,
                sidecar = paths.Sidecar,
                report = paths.Report,
                aligned = r.Aligned,
                dimensions = r.Dimensions,
                voxel_size_mm = r.VoxelSizeMm,
                axis_codes = r.AxisCodes,
                frame = r.Frame,
                sections = counts,
                warnings = r.Warnings,
            }));
            return;
        }
        var o = console.Out;
        o.WriteLine($"Volume   {paths.Volume}");
        o.WriteLine($"Sidecar  {paths.Sidecar}");
        o.WriteLine($"Report   {paths.Report}");
        o.WriteLine($"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels of {r.VoxelSizeMm[0] * 1000:0.###} × {r.VoxelSizeMm[1] * 1000:0.###} × {r.VoxelSizeMm[2] * 1000:0.###} µm, axes {r.AxisCodes}");
        if (r.Frame is { } f) o.WriteLine($"Frame    {f.Describe()}");
        if (r.Parameters is { SmoothingStrength: double strength, RouteClosure: { } closure })
            o.WriteLine($"Solve    all pairs at once (--smoothing {strength.ToString("R", CultureInfo.InvariantCulture)}). " + (closure.SecondNeighbourWeight == 1
                ? "Section-to-section jitter is evened out; slow drift is not removed without a reference (--template removes it)."
                : "Drift is not reduced, and on this series the result is close to the default build: pairs two sections apart disagree with the nearest ones the same way over stretches of the stack, so they were given little weight. --template removes drift."));
        int filled = r.Sections.Count(s => s.Filled is not null);
        o.WriteLine($"Sections {string.Join(", ", counts.OrderBy(c => c.Key).Select(c => $"{c.Value} {(c.Key == "gap" && c.Value != 1 ? "gaps" : c.Key)}"))}" +
            (filled > 0 ? $"; {filled} empty {(filled == 1 ? "plane" : "planes")} filled from their neighbours" : ""));
        // The same sections the report flags (failed ones are in the warnings below).
        var all = SectionFlags.For(r);
        var flagged = r.Sections.Where(s => s.Status != SectionOutcome.Failed).Select(s => (s.Number, Reasons: all[s.Number])).Where(t => t.Reasons.Count > 0).ToList();
        // Sections flagged for nothing but an estimated error above 2 voxels are, in a build without a template, the chain's
        // slow drift: one line for all of them, so the sections with a trouble of their own stand out.
        var specific = flagged.Where(t => !SectionFlags.EstimateOnly(t.Reasons)).ToList();
        var estimateOnly = flagged.Where(t => SectionFlags.EstimateOnly(t.Reasons)).Select(t => t.Number).ToList();
        const int shown = 6;
        foreach (var (number, reasons) in specific.Take(shown))
            o.WriteLine($"Check    section {number}: {string.Join("; ", reasons)}");
        if (specific.Count > shown) o.WriteLine($"Check    {specific.Count - shown} more section(s): see the report");
        if (estimateOnly.Count > 0)
            o.WriteLine($"Check    {(estimateOnly.Count == 1 ? "section" : "sections")} {SectionNumbers.Runs(estimateOnly)}: estimated placement error above {SectionFlags.EstimatedErrorVoxels} voxels" +
                (r.Sections.Any(x => x.Template is not null) ? "" : " (without a template the chain's course is unchecked and drifts slowly; a template would measure and remove it)"));
        foreach (var w in r.Warnings) o.WriteLine($"warning: {w}");
        if (!alignRequested)
            o.WriteLine("Note: sections were placed centred and NOT aligned (--no-align); this volume shows the series as scanned.");
    }

    /// <summary>
    /// --verbose: one line per stage (wall and CPU seconds, allocated MB, managed heap MB at its end, peak resident MB so
    /// far), then the whole command's wall time. CPU above wall means both cores were busy.
    /// </summary>
    private static void ReportStages(CliOutput console, StageClock clock, TimeSpan total, PairCacheFolder? pairCache)
    {
        var e = console.Error;
        static string Mb(long bytes) => (bytes / 1048576.0).ToString("0", CultureInfo.InvariantCulture);
        static string S(TimeSpan t) => t.TotalSeconds.ToString("0.00", CultureInfo.InvariantCulture);
        e.WriteLine($"{"stage",-16} {"wall s",8} {"cpu s",8} {"alloc MB",9} {"heap MB",8} {"peak RSS MB",12}");
        foreach (var s in clock.Stages)
            e.WriteLine($"{s.Stage,-16} {S(s.Wall),8} {S(s.Cpu),8} {Mb(s.AllocatedBytes),9} {Mb(s.HeapBytes),8} {Mb(s.PeakResidentBytes),12}");
        var cpu = clock.Stages.Aggregate(TimeSpan.Zero, (sum, s) => sum + s.Cpu);
        e.WriteLine($"{"all stages",-16} {S(clock.Stages.Aggregate(TimeSpan.Zero, (sum, s) => sum + s.Wall)),8} {S(cpu),8} " +
            $"{Mb(clock.Stages.Sum(s => s.AllocatedBytes)),9} {"",8} {Mb(clock.Stages.Max(s => s.PeakResidentBytes)),12}");
        e.WriteLine($"command wall time {S(total)} s (from the options checked to the summary printed)");
        if (pairCache is not null)
            e.WriteLine($"pair cache {pairCache.Folder}: {pairCache.Reused} pairs reused, {pairCache.Kept} registered and kept" +
                (pairCache.Untrusted > 0 ? $", {pairCache.Untrusted} damaged entries registered again" : "") +
                (pairCache.NotKept > 0 ? $", {pairCache.NotKept} could not be kept (the folder is not writable or the disk is full)" : ""));
    }

    internal static double? Positive(double? value, string name)
    {
        if (value is null) return null;
        if (!(value > 0) || double.IsInfinity(value.Value))
            throw new InputProblemException(null, $"{name} must be a positive number of µm, not {value}", $"give {name} a value such as 10");
        return value;
    }

    internal static double NonNegative(double value, string name) => value >= 0 && double.IsFinite(value) ? value
        : throw new InputProblemException(null, $"{name} must be zero or a positive number of µm, not {value}", $"give {name} a value such as 250");

    /// <summary>Three comma-separated numbers (mm), e.g. "0,0,0" or "-1.5,2,10".</summary>
    internal static (double X, double Y, double Z) ParsePoint(string text, string name)
    {
        var parts = text.Split(',', StringSplitOptions.TrimEntries);
        var values = new double[3];
        if (parts.Length != 3 || !parts.Select((p, i) => double.TryParse(p, System.Globalization.NumberStyles.Float,
                System.Globalization.CultureInfo.InvariantCulture, out values[i]) && double.IsFinite(values[i])).All(ok => ok))
            throw new InputProblemException(null, $"{name} '{text}' is not three numbers X,Y,Z in mm", $"write it as {name} 0,0,0 (no spaces, a point for decimals)");
        return (values[0], values[1], values[2]);
    }

    internal static char ParseCutAxis(string text) => text.Trim().ToLowerInvariant() switch
    {
        "i" => 'i',
        "j" => 'j',
        "k" => 'k',
        _ => throw new InputProblemException(null, $"--template-axis '{text}' is not a voxel axis", "use i, j or k (stackbuild info TEMPLATE shows its axes)"),
    };

    internal static double? FiniteOrNull(double? value, string name) => value is null ? null : Finite(value.Value, name);

    internal static int WorkSize(int value) => value is >= 64 and <= 8192 ? value
        : throw new InputProblemException(null, $"--work-size must be between 64 and 8192 pixels, not {value}", "512 suits most series; use more for fine detail");

    internal static double Fraction(double value, string name) => value is >= 0 and <= 1 ? value
        : throw new InputProblemException(null, $"{name} must be between 0 and 1, not {value}", $"give {name} a value such as 0.2");

    internal static double Finite(double value, string name) => double.IsFinite(value) ? value
        : throw new InputProblemException(null, $"{name} must be a number, not {value}", $"give {name} a value such as 1");

    internal static GapFill ParseFill(string text) => text.Trim().ToLowerInvariant() switch
    {
        "flow" => GapFill.Flow,
        "linear" => GapFill.Linear,
        "none" => GapFill.None,
        _ => throw new InputProblemException(null, $"--fill '{text}' is not known", "use flow, linear or none"),
    };

    internal static GrayChannel ParseChannel(string text) => text.Trim().ToLowerInvariant() switch
    {
        "luminance" or "gray" or "grey" => GrayChannel.Luminance,
        "red" => GrayChannel.Red,
        "green" => GrayChannel.Green,
        "blue" => GrayChannel.Blue,
        _ => throw new InputProblemException(null, $"--channel '{text}' is not known", "use luminance, red, green or blue"),
    };

    internal static Interpolation ParseInterpolation(string text) => text.Trim().ToLowerInvariant() switch
    {
        "bilinear" or "linear" => Interpolation.Bilinear,
        "bicubic" or "cubic" => Interpolation.Bicubic,
        _ => throw new InputProblemException(null, $"--interpolation '{text}' is not known", "use bilinear or bicubic"),
    };
}
