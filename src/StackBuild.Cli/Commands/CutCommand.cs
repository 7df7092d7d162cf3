using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using StackBuild.Demo;
using StackBuild.IO;
using StackBuild.Nifti;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild cut VOLUME OUT_DIR</c>: a synthetic section series with ground truth, cut from a volume the user trusts.</summary>
public static class CutCommand
{
    public static Command Create(CliOutput console)
    {
        var volume = new Argument<string>("VOLUME") { Description = "A NIfTI-1 volume you trust (an MRI of the specimen, a public template)" };
        var outDir = new Argument<string>("OUT_DIR") { Description = "Folder to write the series into (created if missing; must be new or empty, or an earlier cut)" };
        var d = new CutOptions();
        var axis = new Option<string>("--axis") { Description = "The volume's voxel axis the knife advances along: i, j or k", DefaultValueFactory = _ => "k" };
        var every = new Option<int>("--every") { Description = "Keep every k-th plane", DefaultValueFactory = _ => d.Every };
        var from = new Option<int?>("--from") { Description = "First plane to cut [default: the first plane holding tissue]" };
        var to = new Option<int?>("--to") { Description = "Last plane to cut [default: the last plane holding tissue]" };
        var pixel = new Option<double?>("--pixel-size") { Description = "Scan pixel size in µm [default: the volume's in-plane voxel size]" };
        var canvas = new Option<double>("--canvas") { Description = "Canvas side over the plane's long side", DefaultValueFactory = _ => d.CanvasScale };
        var shift = new Option<double>("--shift") { Description = "Largest shift of a section from the canvas centre, as a share of the canvas", DefaultValueFactory = _ => d.MaxShift };
        var faceDown = new Option<double>("--face-down") { Description = "Share of the sections mounted face down", DefaultValueFactory = _ => d.FaceDown };
        var lost = new Option<double>("--lost") { Description = "Share of the sections lost (one next to each end when above 0)", DefaultValueFactory = _ => d.Lost };
        var gain = new Option<double>("--gain-spread") { Description = "Stain gain drawn from 1 ± this, per section", DefaultValueFactory = _ => d.GainSpread };
        var noise = new Option<double>("--noise") { Description = "Noise standard deviation as a share of the intensity range", DefaultValueFactory = _ => d.Noise };
        var bright = new Option<bool>("--bright-field") { Description = "Tissue dark on a bright slide (default: bright on dark)" };
        var bits = new Option<int>("--bits") { Description = "8 or 16 bits per pixel", DefaultValueFactory = _ => d.Bits };
        var spacing = new Option<double?>("--spacing") { Description = "Section spacing in µm [default: the voxel size along the axis × --every]" };
        var tilt = new Option<string?>("--tilt") { Description = "The knife's tilt against the volume's voxel planes, X,Y degrees about the plane's x and y axes (e.g. 4,-2) [default: 0,0]" };
        var seed = new Option<int>("--seed") { Description = "Random seed: the same seed gives the same series", DefaultValueFactory = _ => d.Seed };
        var command = new Command("cut",
            "Cut a volume you trust into a synthetic section series with ground truth, to check build settings on data of your own kind: " +
            "every k-th plane along one voxel axis over the whole extent that holds tissue (both ends included), each turned at any angle, " +
            "shifted, some mounted face down, some lost, with stain gain and noise. Writes PNG scans, manifest.csv and truth.json " +
            "(which 'stackbuild evaluate' reads).\n\n" +
            "Example:\n  stackbuild cut brain.nii.gz cut-series --axis j --every 3\n" +
            "  stackbuild build cut-series -o cut.nii.gz\n  stackbuild evaluate cut.json --truth cut-series/truth.json")
        {
            volume, outDir, axis, every, from, to, pixel, canvas, shift, faceDown, lost, gain, noise, bright, bits, spacing, tilt, seed,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            string axisText = (parse.GetValue(axis) ?? "k").Trim().ToLowerInvariant();
            var (tiltX, tiltY) = ParseTilt(parse.GetValue(tilt));
            var options = new CutOptions
            {
                Axis = axisText.Length == 1 ? axisText[0] : '?',
                Every = parse.GetValue(every),
                FromPlane = parse.GetValue(from),
                ToPlane = parse.GetValue(to),
                PixelSizeUm = parse.GetValue(pixel),
                CanvasScale = parse.GetValue(canvas),
                MaxShift = parse.GetValue(shift),
                FaceDown = parse.GetValue(faceDown),
                Lost = parse.GetValue(lost),
                GainSpread = parse.GetValue(gain),
                Noise = parse.GetValue(noise),
                BrightField = parse.GetValue(bright),
                Bits = parse.GetValue(bits),
                SpacingUm = parse.GetValue(spacing),
                Seed = parse.GetValue(seed),
                TiltXDegrees = tiltX,
                TiltYDegrees = tiltY,
            };
            return Run(console, parse.GetValue(volume)!, parse.GetValue(outDir)!, options);
        }));
        return command;
    }

    /// <summary>--tilt X,Y in degrees; none gives 0, 0.</summary>
    internal static (double X, double Y) ParseTilt(string? text)
    {
        if (text is null) return (0, 0);
        var parts = text.Split(',', StringSplitOptions.TrimEntries);
        var values = new double[2];
        if (parts.Length != 2 || !parts.Select((p, i) => double.TryParse(p, System.Globalization.NumberStyles.Float,
                System.Globalization.CultureInfo.InvariantCulture, out values[i]) && double.IsFinite(values[i])).All(ok => ok))
            throw new InputProblemException(null, $"--tilt '{text}' is not two numbers X,Y in degrees", "write it as --tilt 4,-2 (no spaces, a point for decimals)");
        return (values[0], values[1]);
    }

    private static int Run(CliOutput console, string volumePath, string outDir, CutOptions options)
    {
        VolumeCutter.Check(options);
        if (StackBuild.Template.TemplateVolume.ImageKind(volumePath) is { } kind)
            throw new InputProblemException(volumePath, $"is a {kind} image, not a NIfTI-1 volume", "give the volume to cut as a .nii or .nii.gz file");
        var clock = Stopwatch.StartNew();
        console.Progress($"reading {volumePath}…");
        var image = NiftiFile.Read(volumePath);
        var series = VolumeCutter.Cut(image.ToVolume(), options, volumePath);
        CheckOutputFolder(outDir); // only once the cut succeeded: an earlier cut is replaced
        console.Progress($"writing {series.Sections.Count(s => !s.Lost)} scans to {outDir}…");
        VolumeCutter.Write(series, outDir);
        console.EndProgress();
        string Numbers(Func<CutSection, bool> which) =>
            string.Join(", ", series.Sections.Where(which).Select(s => s.Number.ToString(CultureInfo.InvariantCulture)));
        var o = console.Out;
        var first = series.Sections[0];
        var last = series.Sections[^1];
        o.WriteLine($"Cut {series.Sections.Count} sections from {Path.GetFileName(volumePath)} into {outDir} ({clock.Elapsed.TotalSeconds:0.0} s):");
        o.WriteLine($"  planes {first.Plane} to {last.Plane} along axis {options.Axis}, every {options.Every}; {series.SpacingUm:0.##} µm apart");
        o.WriteLine($"  {series.Canvas}×{series.Canvas} px scans, {options.Bits}-bit gray PNG, {series.PixelSizeUm:0.##} µm pixels, " +
                    (options.BrightField ? "tissue dark on bright" : "tissue bright on dark"));
        o.WriteLine($"  tissue share of the canvas: {first.TissueShare:P1} at section 1, {series.Sections.Max(s => s.TissueShare):P1} at most, {last.TissueShare:P1} at section {last.Number}");
        o.WriteLine($"  lost: {Or(Numbers(s => s.Lost))}; face down: {Or(Numbers(s => s.Mirrored))} (not in the manifest; registration must find them)");
        o.WriteLine($"Next: stackbuild build {outDir} -o {outDir.TrimEnd('/', '\\')}-volume.nii.gz");
        o.WriteLine($"      stackbuild evaluate {outDir.TrimEnd('/', '\\')}-volume.json --truth {Path.Combine(outDir, VolumeCutter.TruthFileName)}");
        return CliOutput.ExitOk;
    }

    private static string Or(string numbers) => numbers.Length > 0 ? numbers : "none";

    /// <summary>Refuses a folder that holds anything but an earlier cut, so a typo cannot scatter files into someone's data.</summary>
    private static void CheckOutputFolder(string outDir)
    {
        if (string.IsNullOrWhiteSpace(outDir))
            throw new InputProblemException(null, "no output folder given", "name a folder, for example: stackbuild cut brain.nii.gz my-cut");
        if (File.Exists(outDir))
            throw new InputProblemException(outDir, "this is a file, not a folder", "choose a new folder name for the series");
        if (!Directory.Exists(outDir) || !Directory.EnumerateFileSystemEntries(outDir).Any()) return;
        if (VolumeCutter.IsCutFolder(outDir)) { VolumeCutter.RemoveEarlierScans(outDir); return; }
        throw new InputProblemException(outDir, "the folder is not empty and was not made by `stackbuild cut`",
            "choose a new or empty folder, or move its contents elsewhere first");
    }
}
