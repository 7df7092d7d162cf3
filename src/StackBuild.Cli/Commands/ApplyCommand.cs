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
        var output = new Option<string>("--output", "-o") { Description = "Output volume, .nii.gz or .nii, or .ome.zarr (an OME-Zarr folder); a sidecar .json saying what was applied is written beside it", Required = true };
        var manifest = new Option<string?>("--manifest") { Description = "Manifest CSV to use instead of IMAGES/manifest.csv" };
        var pixelSize = new Option<double?>("--pixel-size") { Description = "Pixel size of the other images in µm (overrides their manifest); when it differs from the build's, the stored placements are scaled by the ratio" };
        var outPixel = new Option<double?>("--output-pixel-size") { Description = "In-plane voxel size of the applied volume in µm (default: the build's). The grid covers the build's extent, its first voxel's outer corner where the build's is" };
        var voxelSize = new Option<double?>("--voxel-size") { Description = "Voxel size in µm, as build takes it: the plane spacing (planes between sections interpolated like the gaps) and, unless --output-pixel-size is given, the in-plane size (default: the build's)" };
        var channel = new Option<string>("--channel") { Description = "How colour images become gray: luminance, red, green or blue", DefaultValueFactory = _ => "luminance" };
        var json = new Option<bool>("--json") { Description = "Print a machine-readable summary instead of text" };
        images.HelpName = "DIR";
        manifest.HelpName = "CSV";
        pixelSize.HelpName = "UM";
        outPixel.HelpName = "UM";
        voxelSize.HelpName = "UM";
        channel.HelpName = "CHANNEL";
        var command = new Command("apply",
            "Draw another image set of the same sections (another stain or channel, another export size) through the placements a " +
            "build stored in its sidecar, into the same grid and affine as the build's volume. Sections are matched by number; " +
            "sections the other set lacks are filled from their neighbours as the build fills gaps.\n\n" +
            "Examples:\n  stackbuild build nissl -o nissl.nii.gz\n  stackbuild apply nissl.json --images gfap -o gfap.nii.gz\n" +
            "  stackbuild apply nissl.json --images nissl-full --pixel-size 0.5 --output-pixel-size 5 -o nissl-5um.nii.gz   (a finer grid)")
        {
            sidecar, images, output, manifest, pixelSize, outPixel, voxelSize, channel, json,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            string sidecarPath = parse.GetValue(sidecar)!;
            var paths = BuildOutputPaths.For(parse.GetValue(output)!);
            paths.CheckWritable();
            BuildWriter.CheckNotReplacing(paths, sidecarPath);
            var gray = BuildCommand.ParseChannel(parse.GetValue(channel)!);
            var grid = new ApplyGridOptions
            {
                OutputPixelSizeUm = BuildCommand.Positive(parse.GetValue(outPixel), "--output-pixel-size"),
                VoxelSizeUm = BuildCommand.Positive(parse.GetValue(voxelSize), "--voxel-size"),
            };
            var record = SidecarFile.ReadWithVolume(sidecarPath, console.Error);
            var series = ApplyStage.OpenImages(parse.GetValue(images)!, record, new SeriesOptions
            {
                ManifestPath = parse.GetValue(manifest),
                PixelSizeUm = BuildCommand.Positive(parse.GetValue(pixelSize), "--pixel-size"),
            });
            var result = ApplyStage.Apply(record, sidecarPath, series, SectionFiles.Instance, gray, DateTime.UtcNow,
                new BuildCommand.SyncProgress(console), grid);
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
                    voxel_size_mm = r.VoxelSizeMm,
                    drawn = r.Sections.Count(s => s.Matrix is not null),
                    missing_sections = r.MissingSections,
                    warnings = r.Warnings,
                }));
                return CliOutput.ExitOk;
            }
            var o = console.Out;
            o.WriteLine($"Volume   {paths.Volume}");
            o.WriteLine($"Sidecar  {paths.Sidecar}");
            o.WriteLine(r.Grid is { Grid: "the build's" } or null
                ? $"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels, the same grid and affine as {Path.GetFileName(sidecarPath)}'s volume"
                : $"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels of {r.VoxelSizeMm[0] * 1000:0.###} × {r.VoxelSizeMm[1] * 1000:0.###} × {r.VoxelSizeMm[2] * 1000:0.###} µm over the extent of {Path.GetFileName(sidecarPath)}'s grid, its first voxel's outer corner in place");
            o.WriteLine($"Sections {r.Sections.Count(s => s.Matrix is not null)} drawn through the stored placements");
            foreach (var w in r.Warnings) o.WriteLine($"warning: {w}");
            return CliOutput.ExitOk;
        }));
        return command;
    }
}
