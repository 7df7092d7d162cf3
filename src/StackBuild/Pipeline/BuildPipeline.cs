using System.Reflection;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Render;
using StackBuild.Series;

namespace StackBuild.Pipeline;

/// <summary>Options of one build, passed down explicitly.</summary>
public sealed record BuildOptions
{
    public required string Input { get; init; }
    public SeriesOptions Series { get; init; } = new();
    public AxisCodes Axes { get; init; } = AxisCodes.Default;
    /// <summary>In-plane voxel size of the output in µm; null = the series' pixel size, coarsened to fit <see cref="MaxPlaneSide"/>.</summary>
    public double? OutputPixelSizeUm { get; init; }
    /// <summary>Largest side of an output plane, in voxels, when the voxel size is chosen automatically.</summary>
    public int MaxPlaneSide { get; init; } = 2048;
    public Interpolation Interpolation { get; init; } = Interpolation.Bilinear;
    public GrayChannel Channel { get; init; } = GrayChannel.Luminance;
}

/// <summary>A built volume (intensities in the input's own units: 0–255 for 8-bit, 0–65535 for 16-bit) and its record.</summary>
public sealed record BuildResult(Volume Volume, BuildRecord Record, int InputBitDepth);

/// <summary>series → (register → solve, later) → render: the whole build as one pure call on the input files.</summary>
public static class BuildPipeline
{
    public static string Version =>
        typeof(BuildPipeline).Assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion.Split('+')[0] ?? "0";

    public static BuildResult Run(BuildOptions options, IProgress<string>? progress = null)
    {
        var series = SeriesReader.Open(options.Input, options.Series);
        var present = series.Sections.Where(s => s.Status == SectionStatus.Present && s.Image is not null).ToList();
        if (present.Count == 0)
            throw new InputProblemException(options.Input, "the series has no sections to build (all are gaps or excluded)",
                "check the manifest's exclude column and the file names");

        int bits = present.Max(s => s.Image!.BitsPerChannel);
        double maxValue = bits > 8 ? 65535 : 255;

        // Output in-plane voxel size.
        double largestUm = present.Max(s => Math.Max(s.Image!.Width, s.Image!.Height) * s.PixelSizeUm);
        double outUm = options.OutputPixelSizeUm ?? series.PixelSizeUm;
        if (options.OutputPixelSizeUm is null && largestUm / outUm > options.MaxPlaneSide)
            outUm = largestUm / options.MaxPlaneSide;
        if (!(outUm > 0) || double.IsInfinity(outUm))
            throw new InputProblemException(null, $"output pixel size {outUm} µm is not a positive number", "give a positive --output-pixel-size in µm");

        // Unaligned placement: every section scaled to the output voxel size and centred in a common grid.
        int nx = 1, ny = 1;
        foreach (var s in present)
        {
            double scale = s.PixelSizeUm / outUm;
            nx = Math.Max(nx, (int)Math.Ceiling(s.Image!.Width * scale));
            ny = Math.Max(ny, (int)Math.Ceiling(s.Image!.Height * scale));
        }
        double firstPosition = series.Sections[0].PositionUm;
        var zIndex = series.Sections.ToDictionary(s => s.Number, s => (int)Math.Round((s.PositionUm - firstPosition) / series.SpacingUm));
        int nz = zIndex.Values.Max() + 1;
        long voxels = (long)nx * ny * nz;
        if (voxels > Array.MaxLength)
            throw new InputProblemException(options.Input, $"the output would have {nx}×{ny}×{nz} voxels, more than fits in memory",
                "choose a coarser --output-pixel-size");

        var affine = Affine.FromAxes(options.Axes, outUm / 1000, outUm / 1000, series.SpacingUm / 1000, nx, ny, nz);
        var volume = new Volume(nx, ny, nz, affine);
        var warnings = new List<string>(series.Warnings);
        var records = new List<SectionRecord>();
        var occupied = new Dictionary<int, int>();
        int done = 0;
        foreach (var s in series.Sections)
        {
            int k = zIndex[s.Number];
            var record = new SectionRecord
            {
                Number = s.Number,
                File = s.FilePath is null ? null : Path.GetRelativePath(series.Folder, s.FilePath),
                ZIndex = k,
                PositionUm = s.PositionUm,
                PixelSizeUm = s.Status == SectionStatus.Gap ? null : s.PixelSizeUm,
                Damaged = s.Damaged,
                Mirrored = s.MountedMirrored,
                Note = string.IsNullOrEmpty(s.Note) ? null : s.Note,
            };
            if (s.Status != SectionStatus.Present || s.Image is null)
            {
                records.Add(record with { Status = s.Status == SectionStatus.Excluded ? "excluded" : "gap" });
                continue;
            }
            if (occupied.TryGetValue(k, out int other))
                warnings.Add($"sections {other} and {s.Number} fall on the same plane {k}; the later one is kept — check the positions or the spacing");
            occupied[k] = s.Number;

            var full = s.Image;
            double scale = s.PixelSizeUm / outUm;
            var imageToPlane = Transform2D.Translation(-(full.Width - 1) / 2.0, -(full.Height - 1) / 2.0)
                .Then(Transform2D.Scale(scale))
                .Then(Transform2D.Translation((nx - 1) / 2.0, (ny - 1) / 2.0));
            if (s.MountedMirrored == true)
                imageToPlane = Transform2D.MirrorX((full.Width - 1) / 2.0).Then(imageToPlane);

            int? loadSide = scale < 1 ? (int)Math.Ceiling(Math.Max(full.Width, full.Height) * scale) : null;
            var image = SectionImageReader.ReadGray(s.FilePath!, new ImageReadOptions { Channel = options.Channel, MaxLongSide = loadSide });
            double imageToFull = (double)full.Width / image.Width;
            float fill = (float)(BorderMedian(image) * maxValue);
            ScaleInPlace(image, (float)maxValue);
            StackRenderer.RenderSection(volume, new PlacedSection(k, imageToPlane), image, imageToFull, fill, options.Interpolation);
            records.Add(record with
            {
                Status = "placed",
                RotationDegrees = 0,
                ShiftPx = [imageToPlane.M02, imageToPlane.M12],
                Matrix = imageToPlane.ToRows(),
            });
            progress?.Report($"placed section {s.Number} ({++done}/{present.Count})");
        }
        RoundInPlace(volume.Voxels, (float)maxValue);

        var sizes = affine.VoxelSizes;
        var record0 = new BuildRecord
        {
            Version = Version,
            Created = DateTime.UtcNow.ToString("yyyy-MM-ddTHH:mm:ssZ"),
            Input = series.ManifestPath ?? series.Folder,
            Aligned = false,
            Dimensions = [nx, ny, nz],
            VoxelSizeMm = [sizes.I, sizes.J, sizes.K],
            AxisCodes = options.Axes.Code,
            Affine = affine.ToRows(),
            InputPixelSizeUm = series.PixelSizeUm,
            SpacingUm = series.SpacingUm,
            Parameters = new()
            {
                ["output_pixel_size_um"] = outUm.ToString("R", System.Globalization.CultureInfo.InvariantCulture),
                ["interpolation"] = options.Interpolation.ToString().ToLowerInvariant(),
                ["channel"] = options.Channel.ToString().ToLowerInvariant(),
                ["alignment"] = "none (sections placed centred, unaligned)",
            },
            Warnings = warnings,
            Sections = records,
        };
        return new BuildResult(volume, record0, bits);
    }

    private static double BorderMedian(GrayImage image)
    {
        var border = new List<float>(2 * (image.Width + image.Height));
        for (int x = 0; x < image.Width; x++) { border.Add(image[x, 0]); border.Add(image[x, image.Height - 1]); }
        for (int y = 1; y < image.Height - 1; y++) { border.Add(image[0, y]); border.Add(image[image.Width - 1, y]); }
        border.Sort();
        return border[border.Count / 2];
    }

    private static void ScaleInPlace(GrayImage image, float factor)
    {
        var p = image.Pixels;
        for (int i = 0; i < p.Length; i++) p[i] *= factor;
    }

    private static void RoundInPlace(float[] values, float max)
    {
        for (int i = 0; i < values.Length; i++) values[i] = Math.Clamp(MathF.Round(values[i]), 0, max);
    }
}
