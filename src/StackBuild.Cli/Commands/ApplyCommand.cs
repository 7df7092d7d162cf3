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
        var channels = new Option<string>("--channels") { Description = "What colour and pages become: gray (one volume, gray by --channel; the first page), rgb (one NIfTI RGB24 volume of 8-bit colour images) or split (one volume per colour channel and per TIFF page, named OTHER_red, OTHER_green, OTHER_blue, OTHER_page2 …)", DefaultValueFactory = _ => "gray" };
        var sections = new Option<string?>("--sections") { Description = "Render only sections A to B (e.g. 1-20) into a part file: float32 planes before gap filling and rounding, with a sidecar; put the parts together with 'stackbuild merge'" };
        var json = new Option<bool>("--json") { Description = "Print a machine-readable summary instead of text" };
        images.HelpName = "DIR";
        manifest.HelpName = "CSV";
        pixelSize.HelpName = "UM";
        outPixel.HelpName = "UM";
        voxelSize.HelpName = "UM";
        channel.HelpName = "CHANNEL";
        channels.HelpName = "gray|rgb|split";
        sections.HelpName = "A-B";
        var command = new Command("apply",
            "Draw another image set of the same sections (another stain or channel, another export size) through the placements a " +
            "build stored in its sidecar, into the same grid and affine as the build's volume. Sections are matched by number; " +
            "sections the other set lacks are filled from their neighbours as the build fills gaps.\n\n" +
            "Examples:\n  stackbuild build nissl -o nissl.nii.gz\n  stackbuild apply nissl.json --images gfap -o gfap.nii.gz\n" +
            "  stackbuild apply nissl.json --images nissl-full --pixel-size 0.5 --output-pixel-size 5 -o nissl-5um.nii.gz   (a finer grid)\n" +
            "  stackbuild apply nissl.json --images he-colour --channels split -o he.nii.gz   (he_red, he_green, he_blue)\n" +
            "  stackbuild apply nissl.json --images gfap --sections 1-30 -o gfap-1.nii.gz   (a part; then 'stackbuild merge')")
        {
            sidecar, images, output, manifest, pixelSize, outPixel, voxelSize, channel, channels, sections, json,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            string sidecarPath = parse.GetValue(sidecar)!;
            var paths = BuildOutputPaths.For(parse.GetValue(output)!);
            paths.CheckWritable();
            BuildWriter.CheckNotReplacing(paths, sidecarPath);
            var gray = BuildCommand.ParseChannel(parse.GetValue(channel)!);
            var mode = ParseChannels(parse.GetValue(channels)!);
            (int First, int Last)? range = parse.GetValue(sections) is { } rangeText ? ParseRange(rangeText) : null;
            if (range is not null && mode == ChannelOutput.Rgb)
                throw new StackBuild.IO.InputProblemException(null, "--sections renders parts of gray volumes, not of an RGB24 volume",
                    "use --channels split with --sections and merge each channel's parts, or leave out --sections");
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
            var plan = ApplyChannels.Plan(series, mode, gray);
            var outputs = plan.Select(c => paths.WithSuffix(c.Suffix)).ToList();
            foreach (var p in outputs)
            {
                p.CheckWritable();
                BuildWriter.CheckNotReplacing(p, sidecarPath);
            }
            if (range is var (first, last))
            {
                var imagesPath = Path.GetFullPath(parse.GetValue(images)!);
                var options = new ApplyPartOptions
                {
                    Images = imagesPath,
                    Manifest = parse.GetValue(manifest) is { } m ? Path.GetFullPath(m) : null,
                    PixelSizeUm = parse.GetValue(pixelSize),
                    OutputPixelSizeUm = grid.OutputPixelSizeUm,
                    VoxelSizeUm = grid.VoxelSizeUm,
                };
                var parts = plan.Select((c, i) =>
                {
                    var applyPlan = ApplyStage.Plan(record, sidecarPath, series, c.Channel, grid, c.Page);
                    var (planes, drawn) = ApplyParts.Render(applyPlan, SectionFiles.Instance, first, last, new BuildCommand.SyncProgress(console));
                    var partRecord = ApplyParts.PartRecord(applyPlan, first, last, drawn,
                        options with { Channel = c.Channel.ToString().ToLowerInvariant(), PageIndex = c.Page }, DateTime.UtcNow);
                    return (partRecord, planes, outputs[i]);
                }).ToList();
                console.EndProgress();
                var partsWritten = BuildWriter.WriteAppliedParts(parts);
                if (parse.GetValue(json))
                {
                    console.Out.WriteLine(JsonSerializer.Serialize(new
                    {
                        parts = partsWritten.Select((w, i) => new { volume = outputs[i].Volume, sidecar = outputs[i].Sidecar, channel = w.Channel, page = w.Page, drawn = w.Part!.Drawn }),
                        sections = new[] { first, last },
                    }));
                    return CliOutput.ExitOk;
                }
                for (int i = 0; i < partsWritten.Count; i++)
                {
                    console.Out.WriteLine($"Part     {outputs[i].Volume} (sections {first}–{last}: {partsWritten[i].Part!.Drawn.Count} drawn{(plan.Count > 1 ? $"; {partsWritten[i].Channel}{(partsWritten[i].Page is int pg ? $", page {pg}" : "")}" : "")})");
                    console.Out.WriteLine($"Sidecar  {outputs[i].Sidecar}");
                }
                console.Out.WriteLine("Merge    stackbuild merge PART.json … -o OUT.nii.gz, with the parts covering every section once");
                return CliOutput.ExitOk;
            }
            // Plane by plane into the output files: the volume is never held (docs/benchmarks.md, memory of apply).
            var plans = plan.Select(c => ApplyStage.Plan(record, sidecarPath, series, c.Channel, grid, c.Page)).ToList();
            var progress = new BuildCommand.SyncProgress(console);
            Func<Func<int, StackBuild.Geometry.Affine, RenderStage.IPlaneSink>, ApplyRecord> Render(ApplyPlan p) =>
                open => ApplyStage.ApplyInto(p, SectionFiles.Instance, open, DateTime.UtcNow, progress);
            var streamed = mode == ChannelOutput.Rgb
                ? [new StreamedApplied(paths, plans[0].Bits, plans.Select(Render).ToList())]
                : plans.Select((p, i) => new StreamedApplied(outputs[i], p.Bits, [Render(p)])).ToList();
            var written = AppliedVolumeStream.Write(streamed);
            console.EndProgress();
            var volumes = mode == ChannelOutput.Rgb ? [paths] : outputs;
            var r = written[0];
            if (parse.GetValue(json))
            {
                console.Out.WriteLine(JsonSerializer.Serialize(new
                {
                    volume = paths.Volume,
                    sidecar = paths.Sidecar,
                    volumes = written.Select((w, i) => new { volume = volumes[i].Volume, sidecar = volumes[i].Sidecar, channel = w.Channel, page = w.Page }),
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
            for (int i = 0; i < written.Count; i++)
            {
                string what = written[i].Channel + (written[i].Page is int page ? $", page {page}" : "");
                o.WriteLine(written.Count == 1 && mode == ChannelOutput.Gray ? $"Volume   {volumes[i].Volume}" : $"Volume   {volumes[i].Volume} ({what})");
                o.WriteLine($"Sidecar  {volumes[i].Sidecar}");
            }
            o.WriteLine(r.Grid is { Grid: "the build's" } or null
                ? $"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels, the same grid and affine as {Path.GetFileName(sidecarPath)}'s volume"
                : $"Grid     {r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels of {r.VoxelSizeMm[0] * 1000:0.###} × {r.VoxelSizeMm[1] * 1000:0.###} × {r.VoxelSizeMm[2] * 1000:0.###} µm over the extent of {Path.GetFileName(sidecarPath)}'s grid, its first voxel's outer corner in place");
            o.WriteLine($"Sections {r.Sections.Count(s => s.Matrix is not null)} drawn through the stored placements");
            foreach (var w in r.Warnings) o.WriteLine($"warning: {w}");
            return CliOutput.ExitOk;
        }));
        return command;
    }

    /// <summary>"A-B" or "A": the first and last section number of a part, A ≤ B.</summary>
    internal static (int First, int Last) ParseRange(string text)
    {
        var pieces = text.Trim().Split('-', StringSplitOptions.TrimEntries);
        if (pieces.Length is 1 or 2 && int.TryParse(pieces[0], out int first) && int.TryParse(pieces[^1], out int last) && first <= last && first >= 0)
            return (first, last);
        throw new StackBuild.IO.InputProblemException(null, $"--sections '{text}' is not a range of section numbers",
            "give the first and last section number, e.g. --sections 1-30 (or one number)");
    }

    internal static ChannelOutput ParseChannels(string text) => text.Trim().ToLowerInvariant() switch
    {
        "gray" or "grey" => ChannelOutput.Gray,
        "rgb" or "colour" or "color" => ChannelOutput.Rgb,
        "split" => ChannelOutput.Split,
        _ => throw new StackBuild.IO.InputProblemException(null, $"--channels '{text}' is not known",
            "give --channels gray (one gray volume), rgb (one colour volume) or split (one volume per channel and page)"),
    };
}
