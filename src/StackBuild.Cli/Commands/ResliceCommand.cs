using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Reslice;

namespace StackBuild.Cli.Commands;

public static class ResliceCommand
{
    public static Command Create(CliOutput console)
    {
        var volumeArg = new Argument<string>("VOL") { Description = "The volume to reslice (NIfTI-1, .nii or .nii.gz)." };
        var output = new Option<string>("--output", "-o") { Description = "The PNG to write (written whole or not at all).", Required = true };
        var plane = new Option<string>("--plane", "-p")
        {
            Description = $"Starting orientation before any tilt: {PlaneOrientation.Accepted}.",
            DefaultValueFactory = _ => "section",
        };
        var tilt = new Option<string?>("--tilt", "-t")
        {
            Description = "Two tilts in degrees, H,V (each −90 to 90): H about the image's horizontal axis " +
                          "(positive: the lower edge goes deeper), then V about its vertical axis (positive: the right edge goes deeper).",
        };
        var offset = new Option<string?>("--offset") { Description = "Move the plane this many mm deeper (towards later sections for the section plane); default 0, through the middle." };
        var size = new Option<string?>("--size") { Description = "Output size in pixels, N or WxH (default: enough to cover the volume)." };
        var pixel = new Option<string?>("--pixel") { Description = "Pixel size in mm (default: the smallest voxel size)." };
        var nearest = new Option<bool>("--nearest") { Description = "Take the nearest voxel instead of trilinear interpolation (for label volumes)." };
        var bits = new Option<string>("--bits") { Description = "PNG bit depth, 8 or 16.", DefaultValueFactory = _ => "8" };
        var window = new Option<string?>("--window", "-w") { Description = "Intensities shown black to white, LOW,HIGH (default: the volume's 0.5th to 99.5th percentiles)." };
        var fill = new Option<string?>("--fill") { Description = "Value for pixels outside the volume (before windowing; default 0)." };
        var json = new Option<bool>("--json") { Description = "Print the plane definition and its corners (mm and voxels) as JSON." };
        var overlay = new Option<string[]>("--overlay")
        {
            Description = "Another volume to lay over the plane, sampled at the plane's world positions through its own affine (any grid). " +
                          "Repeat for more. Makes the output a colour figure, as the viewer's \"Save plane as PNG\" does.",
            Arity = ArgumentArity.OneOrMore,
        };
        var labels = new Option<string[]>("--labels") { Description = "Like --overlay, but always shown as labels.", Arity = ArgumentArity.OneOrMore };
        var labelStyle = new Option<string>("--label-style") { Description = "Labels as outline or fill (flat colours).", DefaultValueFactory = _ => "outline" };
        var opacity = new Option<string?>("--opacity") { Description = "Opacity of every overlay, 0 to 1 (default 0.6 for intensities, 0.9 for labels)." };
        var figure = new Option<bool>("--figure") { Description = "Write a colour figure with edge letters and a scale bar (implied by --overlay and --labels)." };

        var command = new Command("reslice",
            "Cut one plane out of a volume, at any angle, and write it as a grey PNG.\n\n" +
            "Examples:\n" +
            "  stackbuild reslice volume.nii.gz -o section.png\n" +
            "  stackbuild reslice volume.nii.gz --plane jk --tilt 15,-10 --offset 2.5 -o oblique.png --json\n" +
            "  stackbuild reslice volume.nii.gz --plane ik --overlay template.nii.gz --labels regions.nii.gz -o figure.png")
        {
            volumeArg, output, plane, tilt, offset, size, pixel, nearest, bits, window, fill, json, overlay, labels, labelStyle, opacity, figure,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            var path = parse.GetValue(volumeArg)!;
            var outPath = parse.GetValue(output)!;
            var bitsText = parse.GetValue(bits) ?? "8";
            int depth = bitsText switch { "8" => 8, "16" => 16, _ => throw new InputProblemException(null, $"--bits must be 8 or 16, not '{Shorten(bitsText)}'", "use --bits 8 or --bits 16") };
            var spec = Spec(parse.GetValue(plane) ?? "section", parse.GetValue(tilt), Number(parse.GetValue(offset), "--offset", "mm") ?? 0,
                parse.GetValue(size), Number(parse.GetValue(pixel), "--pixel", "mm"));
            float fillValue = (float)(Number(parse.GetValue(fill), "--fill", "value") ?? 0);
            var windowText = parse.GetValue(window);
            var interpolation = parse.GetValue(nearest) ? ResliceSampling.Nearest : ResliceSampling.Linear;

            var overlayFiles = (parse.GetValue(overlay) ?? []).Select(f => (File: f, Labels: false))
                .Concat((parse.GetValue(labels) ?? []).Select(f => (File: f, Labels: true))).ToList();
            bool asFigure = parse.GetValue(figure) || overlayFiles.Count > 0;
            if (asFigure && depth != 8)
                throw new InputProblemException(null, "--bits 16 is for the plain grey plane; a figure (--figure, --overlay, --labels) is 8-bit colour", "leave out --bits, or leave out the overlays");
            var style = parse.GetValue(labelStyle) ?? "outline";
            if (style is not ("outline" or "fill"))
                throw new InputProblemException(null, $"--label-style must be outline or fill, not '{Shorten(style)}'", "use --label-style outline or --label-style fill");
            double? opacityValue = Number(parse.GetValue(opacity), "--opacity", "number from 0 to 1");
            if (opacityValue is { } o && !(o >= 0 && o <= 1))
                throw new InputProblemException(null, $"--opacity must be from 0 to 1, not {o.ToString(CultureInfo.InvariantCulture)}", "give a value such as 0.5");

            var volume = VolumeInput.Load(path, console.Error);
            var overlays = overlayFiles.Select(f =>
            {
                var (other, header) = VolumeInput.LoadWithHeader(f.File, console.Error);
                bool integer = header.DataType is NiftiDataType.UInt8 or NiftiDataType.Int8 or NiftiDataType.Int16 or NiftiDataType.UInt16 or NiftiDataType.Int32;
                return (f.File, Volume: other, Labels: f.Labels || StackBuild.Viewer.ViewerOverlay.LooksLikeLabels(other, integer, header.IntentCode));
            }).ToList();
            var built = spec.Build(volume, path);
            var image = Reslicer.Reslice(volume, built, new ResliceOptions(interpolation, fillValue, MaxThreads: 0));
            var shown = windowText is null ? IntensityWindow.Robust(volume) : IntensityWindow.Parse(windowText);
            var layers = new List<(string File, bool Labels, IntensityWindow Window, double Opacity, FigureLayer Layer)>();
            int tinted = 0;
            foreach (var (file, other, isLabels) in overlays)
            {
                var sampled = Reslicer.Reslice(other, built, new ResliceOptions(isLabels ? ResliceSampling.Nearest : interpolation, float.NaN, MaxThreads: 0));
                var otherWindow = IntensityWindow.Robust(other);
                var pixels = isLabels ? (style == "fill" ? OverlayColours.Fill(sampled) : OverlayColours.Outline(sampled))
                    : OverlayColours.Tint(sampled, otherWindow, OverlayColours.Hues[tinted++ % OverlayColours.Hues.Count]);
                double layerOpacity = opacityValue ?? (isLabels ? 0.9 : 0.6);
                layers.Add((file, isLabels, otherWindow, layerOpacity, new FigureLayer(pixels, layerOpacity)));
            }
            FigureLayout? layout = null;
            if (asFigure)
            {
                layout = FigureLayout.For(built.Width, built.Height);
                using var picture = PlaneFigure.Compose(image, shown, layers.Select(l => l.Layer).ToList(), built, layout);
                PlaneFigure.WriteFile(outPath, picture);
            }
            else
            {
                PlanePng.WriteFile(outPath, image, shown, depth);
            }
            if (parse.GetValue(json))
            {
                var report = new
                {
                    Volume = path,
                    Output = outPath,
                    Bits = depth,
                    Window = new { shown.Low, shown.High },
                    Plane = PlaneDescription.Of(volume, spec, built, interpolation),
                    Figure = layout is null ? null : new
                    {
                        layout.Zoom, layout.Margin, layout.Footer,
                        Width = layout.FigureWidth(built.Width), Height = layout.FigureHeight(built.Height),
                        Overlays = layers.Select(l => new { l.File, l.Labels, Window = new { l.Window.Low, l.Window.High }, l.Opacity }).ToArray(),
                    },
                };
                // snake_case keys, as the sidecar uses (the viewer's API keeps camelCase for its page script).
                console.Out.WriteLine(JsonSerializer.Serialize(report, SnakeCaseJson));
            }
            else
            {
                console.Out.WriteLine(layout is null
                    ? $"wrote {outPath} ({built.Width}×{built.Height} px at {built.PixelSizeMm:0.####} mm, window {shown.Low:G6} to {shown.High:G6})"
                    : $"wrote {outPath} (figure {layout.FigureWidth(built.Width)}×{layout.FigureHeight(built.Height)} px: the plane {built.Width}×{built.Height} px at {built.PixelSizeMm:0.####} mm enlarged {layout.Zoom}×, {layers.Count} overlay{(layers.Count == 1 ? "" : "s")}, window {shown.Low:G6} to {shown.High:G6})");
            }
            return CliOutput.ExitOk;
        }));
        return command;
    }

    private static readonly JsonSerializerOptions SnakeCaseJson = new(PlaneDescription.JsonOptions) { PropertyNamingPolicy = JsonNamingPolicy.SnakeCaseLower };

    /// <summary>
    /// <c>stackbuild reslice-bench [--size N]</c> (hidden): times the reslicer on a synthetic N³ volume, for
    /// docs/benchmarks-reslice.md. A command of its own, so that <c>reslice</c> itself can require its volume and output.
    /// </summary>
    public static Command CreateBenchmark(CliOutput console)
    {
        var size = new Option<int>("--size") { Description = "Edge of the synthetic volume in voxels", DefaultValueFactory = _ => 512 };
        var command = new Command("reslice-bench", "Time the reslicer on a synthetic 512³ volume (for docs/benchmarks-reslice.md).") { size };
        command.Hidden = true;
        command.SetAction(parse => console.Guard(() => Benchmark(console.Out, parse.GetValue(size))));
        return command;
    }

    /// <summary>The plane spec from the command's text options (shared with tests through the same parsing).</summary>
    internal static PlaneSpec Spec(string planeText, string? tiltText, double offsetMm, string? sizeText, double? pixelMm)
    {
        if (!PlaneOrientation.TryParse(planeText, out var orientation, out var problem))
            throw new InputProblemException(null, problem, "see stackbuild reslice --help");
        double h = 0, v = 0;
        if (tiltText is not null)
        {
            var parts = tiltText.Split(',');
            if (parts.Length != 2 || !TryNumber(parts[0], out h) || !TryNumber(parts[1], out v))
                throw new CommandLineProblemException($"--tilt '{Shorten(tiltText)}' is not two angles H,V in degrees", "give it as for example --tilt 10,-5");
        }
        int? width = null, height = null;
        if (sizeText is not null)
        {
            var parts = sizeText.ToLowerInvariant().Split('x');
            if (parts.Length is < 1 or > 2 || !parts.All(p => int.TryParse(p, NumberStyles.None, CultureInfo.InvariantCulture, out _)))
                throw new CommandLineProblemException($"--size '{Shorten(sizeText)}' is not N or WxH in pixels", "give it as for example --size 512 or --size 640x480");
            width = int.Parse(parts[0], CultureInfo.InvariantCulture);
            height = parts.Length == 2 ? int.Parse(parts[1], CultureInfo.InvariantCulture) : width;
        }
        return new PlaneSpec(orientation, h, v, offsetMm, pixelMm, width, height);
    }

    /// <summary>An optional number option, or a one-line input problem naming the option.</summary>
    internal static double? Number(string? text, string option, string what)
    {
        if (text is null) return null;
        if (TryNumber(text, out var value)) return value;
        throw new CommandLineProblemException($"{option} '{Shorten(text)}' is not a number", $"give a {what} such as 0.5");
    }

    private static bool TryNumber(string text, out double value) =>
        double.TryParse(text.Trim(), NumberStyles.Float, CultureInfo.InvariantCulture, out value) && double.IsFinite(value);

    private static string Shorten(string text) => text.Length <= 40 ? text : text[..40] + "…";

    /// <summary>
    /// Times one 512² plane from a 512³ volume of whole numbers 0–255 on one thread (median of repeated runs,
    /// after a warm-up), for several orientations.
    /// </summary>
    private static int Benchmark(TextWriter output, int n)
    {
        const int repeats = 40;
        output.WriteLine($"building a {n}³ volume of values 0–255 ({(long)n * n * n * 4 / (1 << 20)} MB of floats)…");
        var volume = new Volume(n, n, n, Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.05, n, n, n));
        var random = new Random(1);
        Parallel.For(0, n, k =>
        {
            var r = new Random(k);
            for (int j = 0; j < n; j++)
            for (int i = 0; i < n; i++)
                volume.Voxels[((long)k * n + j) * n + i] = (byte)((i ^ j) + k + r.Next(16));
        });
        (string Name, PlaneSpec Spec)[] cases =
        [
            ("section (i,j), untilted", new PlaneSpec(PlaneOrientation.Section, PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
            ("ik, untilted", new PlaneSpec(PlaneOrientation.Parse("ik"), PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
            ("jk, untilted", new PlaneSpec(PlaneOrientation.Parse("jk"), PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
            ("section tilted 25°,35°", new PlaneSpec(PlaneOrientation.Section, 25, 35, PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
            ("jk tilted 30°,-40°", new PlaneSpec(PlaneOrientation.Parse("jk"), 30, -40, PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
            ("ik tilted -45°,45°", new PlaneSpec(PlaneOrientation.Parse("ik"), -45, 45, PixelSizeMm: 0.02 * n / 512, Width: 512, Height: 512)),
        ];
        var stopwatch = Stopwatch.StartNew();
        var compact = ResliceSource.Compact(volume);
        output.WriteLine($"prepared the volume as {compact.Storage} in {stopwatch.ElapsedMilliseconds} ms");
        foreach (var source in new[] { compact, ResliceSource.Direct(volume) })
        foreach (var interpolation in new[] { ResliceSampling.Linear, ResliceSampling.Nearest })
        foreach (var (name, spec) in cases)
        {
            var plane = spec.Build(volume);
            var target = new GrayImage(plane.Width, plane.Height);
            var options = new ResliceOptions(interpolation, 0f, MaxThreads: 1);
            for (int w = 0; w < 5; w++) Reslicer.ResliceInto(source, plane, target, options);
            var times = new double[repeats];
            for (int r = 0; r < repeats; r++)
            {
                long t0 = Stopwatch.GetTimestamp();
                Reslicer.ResliceInto(source, plane, target, options);
                times[r] = Stopwatch.GetElapsedTime(t0).TotalMilliseconds;
            }
            Array.Sort(times);
            output.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"{source.Storage,-6} {interpolation.ToString().ToLowerInvariant(),-8} {name,-26} {plane.Width}×{plane.Height}: median {times[repeats / 2]:0.00} ms, best {times[0]:0.00} ms (1 thread)"));
        }
        return CliOutput.ExitOk;
    }
}

/// <summary>Reads the volume a command was given (the first volume of a 4D file, saying so).</summary>
internal static class VolumeInput
{
    public static Volume Load(string path, TextWriter notes) => LoadWithHeader(path, notes).Volume;

    /// <summary>As <see cref="Load"/>, with the file's header (its datatype and intent).</summary>
    public static (Volume Volume, NiftiHeader Header) LoadWithHeader(string path, TextWriter notes)
    {
        if (!File.Exists(path) && !Directory.Exists(path)) // a folder: the reader says what it is
            throw new InputProblemException(path, "no such file", "check the path to the NIfTI volume (.nii or .nii.gz)");
        var image = NiftiFile.Read(path);
        if (image.VolumeCount > 1)
            notes.WriteLine($"note: {path} holds {image.VolumeCount} volumes; using the first");
        return (image.ToVolume(), image.Header);
    }
}
