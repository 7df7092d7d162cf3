using System.CommandLine;
using System.Text.Json;
using StackBuild.Pipeline;
using StackBuild.Series;
using StackBuild.Write;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild apply BUILD.json --images DIR -o OTHER.nii.gz</c>: another image set drawn through a build's stored placements.</summary>
public static class ApplyCommand
{
    public static Command Create(CliOutput console)
    {
        var sidecar = new Argument<string>("BUILD.json") { Description = "The sidecar written beside a volume by 'stackbuild build'" };
        var images = new Option<string>("--images") { Description = "Folder of the other images of the same sections (numbered as the build's, or with a manifest.csv), or a manifest file", Required = true };
        var output = new Option<string>("--output", "-o") { Description = "Output volume, .nii.gz or .nii; a sidecar .json saying what was applied is written beside it", Required = true };
        var manifest = new Option<string?>("--manifest") { Description = "Manifest CSV to use instead of IMAGES/manifest.csv" };
        var pixelSize = new Option<double?>("--pixel-size") { Description = "Pixel size of the other images in µm (overrides their manifest); when it differs from the build's, the stored placements are scaled by the ratio" };
        var channel = new Option<string>("--channel") { Description = "How colour images become gray: luminance, red, green or blue", DefaultValueFactory = _ => "luminance" };
        var json = new Option<bool>("--json") { Description = "Print a machine-readable summary instead of text" };
        images.HelpName = "DIR";
        manifest.HelpName = "CSV";
        pixelSize.HelpName = "UM";
        channel.HelpName = "CHANNEL";
        var command = new Command("apply",
            "Draw another image set of the same sections (another stain or channel, another export size) through the placements a " +
            "build stored in its sidecar, into the same grid and affine as the build's volume. Sections are matched by number; " +
            "sections the other set lacks are filled from their neighbours as the build fills gaps.\n\n" +
            "Example:\n  stackbuild build nissl -o nissl.nii.gz\n  stackbuild apply nissl.json --images gfap -o gfap.nii.gz")
        {
            sidecar, images, output, manifest, pixelSize, channel, json,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            string sidecarPath = parse.GetValue(sidecar)!;
            var paths = BuildOutputPaths.For(parse.GetValue(output)!);
            paths.CheckWritable();
            BuildWriter.CheckNotReplacing(paths, sidecarPath);
            var gray = BuildCommand.ParseChannel(parse.GetValue(channel)!);
            var record = SidecarFile.ReadWithVolume(sidecarPath, console.Error);
            var series = ApplyStage.OpenImages(parse.GetValue(images)!, record, new SeriesOptions
            {
                ManifestPath = parse.GetValue(manifest),
                PixelSizeUm = BuildCommand.Positive(parse.GetValue(pixelSize), "--pixel-size"),
            });
            var result = ApplyStage.Apply(record, sidecarPath, series, SectionFiles.Instance, gray, DateTime.UtcNow,
                new BuildCommand.SyncProgress(console));
            console.EndProgress();
            BuildWriter.WriteApplied(result, paths);
            var r = result.Record;
            if (parse.GetValue(json))
            {
                console.Out.WriteLine(JsonSerializer.Serialize(new
                {
                    volume = paths.Volume,
                    sidecar = paths.Sidecar,
                    placements_from = r.PlacementsFrom,
                    dimensions = r.Dimensions,
                    drawn = r.Sections.Count(s => s.Matrix is not null),
                    missing_sections = r.MissingSections,
                    warnings = r.Warnings,
                }));
                return CliOutput.ExitOk;
            }
            var o = console.Out;
            o.WriteLine($"Volume   {paths.Volume}");
            o.WriteLine($"Sidecar  {paths.Sidecar}");
            o.WriteLine($"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels, the same grid and affine as {Path.GetFileName(sidecarPath)}'s volume");
            o.WriteLine($"Sections {r.Sections.Count(s => s.Matrix is not null)} drawn through the stored placements");
            foreach (var w in r.Warnings) o.WriteLine($"warning: {w}");
            return CliOutput.ExitOk;
        }));
        return command;
    }
}
