using System.CommandLine;
using System.Text.Json;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Pipeline;
using StackBuild.Series;
using StackBuild.Write;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild merge PART.json … -o OUT.nii.gz</c>: the parts of an applied volume put together.</summary>
public static class MergeCommand
{
    public static Command Create(CliOutput console)
    {
        var parts = new Argument<string[]>("PART.json") { Description = "The sidecars of the parts written by 'stackbuild apply --sections', together covering every section of the build once", Arity = ArgumentArity.OneOrMore };
        var output = new Option<string>("--output", "-o") { Description = "Output volume, .nii.gz or .nii; its sidecar .json is written beside it", Required = true };
        var json = new Option<bool>("--json") { Description = "Print a machine-readable summary instead of text" };
        var command = new Command("merge",
            "Put together the parts of an applied volume rendered apart ('stackbuild apply --sections A-B'): the same volume, voxel for " +
            "voxel, as one whole 'apply' run with the same options. The parts must come from one build and one set of options and " +
            "cover every section of the build exactly once. The build's sidecar and the image set's headers are read again (not " +
            "their pixels).\n\nExample:\n  stackbuild apply nissl.json --images gfap --sections 1-30 -o gfap-1.nii.gz\n" +
            "  stackbuild apply nissl.json --images gfap --sections 31-60 -o gfap-2.nii.gz\n" +
            "  stackbuild merge gfap-1.json gfap-2.json -o gfap.nii.gz")
        {
            parts, output, json,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            var paths = BuildOutputPaths.For(parse.GetValue(output)!);
            paths.CheckWritable();
            var files = parse.GetValue(parts)!.Select(p => ApplyParts.Read(p, v => NiftiFile.Read(v).ToVolume(), console.Error))
                .OrderBy(p => p.Record.Part!.Sections[0]).ToList();
            ApplyParts.CheckSameRun(files);
            var first = files[0].Record;
            var options = first.Part!.Options;
            foreach (var f in files)
                if (string.Equals(Path.GetFullPath(f.SidecarPath), Path.GetFullPath(paths.Sidecar), StringComparison.Ordinal))
                    throw new InputProblemException(paths.Volume, "this output's sidecar would replace one of the parts", "choose another output name");
            var build = SidecarFile.ReadWithVolume(first.PlacementsFrom, console.Error);
            BuildWriter.CheckNotReplacing(paths, first.PlacementsFrom);
            var series = ApplyStage.OpenImages(options.Images, build, new SeriesOptions
            {
                ManifestPath = options.Manifest,
                PixelSizeUm = options.PixelSizeUm,
            });
            var channel = BuildCommand.ParseChannel(options.Channel);
            var plan = ApplyStage.Plan(build, first.PlacementsFrom, series, channel,
                new ApplyGridOptions { OutputPixelSizeUm = options.OutputPixelSizeUm, VoxelSizeUm = options.VoxelSizeUm }, options.PageIndex);
            var progress = new BuildCommand.SyncProgress(console);
            var r = AppliedVolumeStream.Write([new StreamedApplied(paths, plan.Bits,
                [open => ApplyParts.MergeInto(plan, files, open, DateTime.UtcNow, progress)])])[0];
            console.EndProgress();
            if (parse.GetValue(json))
            {
                console.Out.WriteLine(JsonSerializer.Serialize(new
                {
                    volume = paths.Volume,
                    sidecar = paths.Sidecar,
                    parts = files.Select(f => f.SidecarPath),
                    dimensions = r.Dimensions,
                    drawn = r.Sections.Count(s => s.Matrix is not null),
                    warnings = r.Warnings,
                }));
                return CliOutput.ExitOk;
            }
            console.Out.WriteLine($"Volume   {paths.Volume}");
            console.Out.WriteLine($"Sidecar  {paths.Sidecar}");
            console.Out.WriteLine($"Parts    {files.Count}, sections {string.Join(", ", files.Select(f => $"{f.Record.Part!.Sections[0]}–{f.Record.Part.Sections[1]}"))}");
            console.Out.WriteLine($"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels");
            foreach (var w in r.Warnings) console.Out.WriteLine($"warning: {w}");
            return CliOutput.ExitOk;
        }));
        return command;
    }
}
