using System.Globalization;
using System.Text.Json.Serialization;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Render;
using StackBuild.Series;

namespace StackBuild.Pipeline;

/// <summary>The sidecar of an applied volume: which images were drawn through which build's placements.</summary>
public sealed record ApplyRecord
{
    [JsonPropertyName("software")] public string Software { get; init; } = "StackBuild";
    [JsonPropertyName("version")] public string Version { get; init; } = "";
    [JsonPropertyName("created")] public string Created { get; init; } = "";
    /// <summary>What was done: always "placements of a build applied to another image set".</summary>
    [JsonPropertyName("applied")] public string Applied { get; init; } = "placements of a build applied to another image set";
    /// <summary>The sidecar whose placements were used.</summary>
    [JsonPropertyName("placements_from")] public string PlacementsFrom { get; init; } = "";
    /// <summary>The image set (folder or manifest) that was drawn.</summary>
    [JsonPropertyName("images")] public string Images { get; init; } = "";
    /// <summary>The name of the volume file (or OME-Zarr folder) this sidecar was written with, in the sidecar's folder.</summary>
    [JsonPropertyName("volume")] public string? Volume { get; init; }
    /// <summary>SHA-256 of that volume file's bytes (lower-case hex); for an OME-Zarr folder see <see cref="SidecarFile.Sha256"/>.</summary>
    [JsonPropertyName("volume_sha256")] public string? VolumeSha256 { get; init; }
    [JsonPropertyName("dimensions")] public int[] Dimensions { get; init; } = [];
    [JsonPropertyName("voxel_size_mm")] public double[] VoxelSizeMm { get; init; } = [];
    [JsonPropertyName("affine")] public double[][] Affine { get; init; } = [];
    /// <summary>The grid the set was drawn into: the build's, or one of another voxel size over the same extent.</summary>
    [JsonPropertyName("grid")] public AppliedGridRecord? Grid { get; init; }
    /// <summary>The image set's pixel size, µm (its manifest or --pixel-size).</summary>
    [JsonPropertyName("pixel_size_um")] public double PixelSizeUm { get; init; }
    [JsonPropertyName("bit_depth")] public int BitDepth { get; init; }
    [JsonPropertyName("channel")] public string Channel { get; init; } = "";
    /// <summary>The page of multi-page images that was drawn, counted from 1; null when the images have one page.</summary>
    [JsonPropertyName("page")] public int? Page { get; init; }
    [JsonPropertyName("interpolation")] public string Interpolation { get; init; } = "";
    [JsonPropertyName("fill")] public string Fill { get; init; } = "";
    /// <summary>Sections the build placed that the image set has no image for; their planes were filled as gaps.</summary>
    [JsonPropertyName("missing_sections")] public List<int> MissingSections { get; init; } = [];
    [JsonPropertyName("warnings")] public List<string> Warnings { get; init; } = [];
    [JsonPropertyName("sections")] public List<AppliedSectionRecord> Sections { get; init; } = [];
    /// <summary>Set when the file is one part of a volume (<c>apply --sections</c>), not a whole volume.</summary>
    [JsonPropertyName("part")] public ApplyPartRecord? Part { get; init; }
}

/// <summary>One section of an applied volume.</summary>
public sealed record AppliedSectionRecord
{
    [JsonPropertyName("number")] public int Number { get; init; }
    [JsonPropertyName("file")] public string? File { get; init; }
    /// <summary>aligned or placed (drawn), gap (no placement or no image), excluded or failed.</summary>
    [JsonPropertyName("status"), JsonConverter(typeof(SidecarWords.StatusConverter))] public SectionOutcome Status { get; init; }
    [JsonPropertyName("z_index")] public int ZIndex { get; init; }
    /// <summary>This image's pixel size over the one the placement was stored for (2 = half as many pixels across).</summary>
    [JsonPropertyName("pixel_ratio")] public double? PixelRatio { get; init; }
    [JsonPropertyName("matrix")] public double[][]? Matrix { get; init; }
    [JsonPropertyName("filled")] public string? Filled { get; init; }
    [JsonPropertyName("filled_from")] public int[]? FilledFrom { get; init; }
}

/// <summary>The grid of an applied volume beside the build's: voxel sizes, and which point of the build's grid was kept.</summary>
public sealed record AppliedGridRecord
{
    /// <summary>"the build's" when the build's grid was used; "another voxel size over the build's extent" otherwise.</summary>
    [JsonPropertyName("grid")] public string Grid { get; init; } = "";
    [JsonPropertyName("output_pixel_size_um")] public double OutputPixelSizeUm { get; init; }
    /// <summary>Distance between planes, µm (the section spacing, or the --voxel-size the planes were resampled to).</summary>
    [JsonPropertyName("plane_spacing_um")] public double PlaneSpacingUm { get; init; }
    [JsonPropertyName("build_output_pixel_size_um")] public double BuildOutputPixelSizeUm { get; init; }
    [JsonPropertyName("build_plane_spacing_um")] public double BuildPlaneSpacingUm { get; init; }
    [JsonPropertyName("build_dimensions")] public int[] BuildDimensions { get; init; } = [];
    /// <summary>What stays where the build put it, in words (<see cref="ApplyGrid.KeptWords"/>).</summary>
    [JsonPropertyName("kept")] public string Kept { get; init; } = "";
}

/// <summary>
/// The voxel size an applied volume is drawn at; null fields keep the build's. The names and meaning are <c>build</c>'s:
/// <see cref="OutputPixelSizeUm"/> is the in-plane size (--output-pixel-size); <see cref="VoxelSizeUm"/> is the plane
/// spacing and, unless <see cref="OutputPixelSizeUm"/> is given, the in-plane size too (--voxel-size).
/// </summary>
public sealed record ApplyGridOptions
{
    public double? OutputPixelSizeUm { get; init; }
    public double? VoxelSizeUm { get; init; }
}

/// <summary>
/// The in-plane grid an applied volume is drawn into, at the section spacing.
/// </summary>
/// <param name="Nx">Voxels along i.</param>
/// <param name="Ny">Voxels along j.</param>
/// <param name="OutputPixelUm">In-plane voxel size, µm.</param>
/// <param name="BuildToGrid">The build's (i, j) → this grid's (i, j).</param>
/// <param name="Affine">The build's affine with its i and j columns scaled and its translation moved so the outer corner of
/// voxel (0, 0) stays where it was (<see cref="ApplyGrid.KeptWords"/>).</param>
/// <param name="PlaneSpacingUm">The plane spacing to resample to at the end; null = the section spacing.</param>
public sealed record ApplyGrid(int Nx, int Ny, double OutputPixelUm, Transform2D BuildToGrid, Geometry.Affine Affine, double? PlaneSpacingUm)
{
    /// <summary>The fixed point of a grid of another voxel size, as the sidecar and README state it.</summary>
    public const string KeptWords = "the outer corner of voxel (0, 0) (i = j = -0.5 in the build's voxels) at its world position, the " +
        "build's in-plane extent (rounded up to whole voxels) and orientation, and plane 0 at the first section's plane";

    /// <summary>
    /// The grid for <paramref name="options"/> over the build's grid (<paramref name="nx"/> × <paramref name="ny"/> voxels of
    /// <paramref name="buildPixelUm"/>, affine <paramref name="atSections"/> at the section spacing). Another in-plane size s
    /// scales the i and j columns by s / build's size and keeps the outer edge of the first voxel: build voxel
    /// coordinate x (i or j) is grid coordinate (x + 0.5)·r − 0.5 with r = build's size / s, so the build's voxel edges −0.5
    /// and n − 0.5 are the grid's −0.5 and n·r − 0.5. The grid has ⌈n·r⌉ voxels, covering the build's extent (the last
    /// may reach past it by less than one voxel). Refuses, naming the option, a size that is not a positive number or a
    /// grid over NIfTI-1's 32767 voxels per axis or over what one array holds.
    /// </summary>
    public static ApplyGrid For(int nx, int ny, int planes, double buildPixelUm, Geometry.Affine atSections, double? buildPlaneSpacingUm,
        double sectionSpacingUm, ApplyGridOptions options)
    {
        string option = options.OutputPixelSizeUm is not null ? "--output-pixel-size" : "--voxel-size";
        double? asked = options.OutputPixelSizeUm ?? options.VoxelSizeUm;
        foreach (var (name, value) in new[] { ("--output-pixel-size", options.OutputPixelSizeUm), ("--voxel-size", options.VoxelSizeUm) })
            if (value is double v && !(v > 0 && double.IsFinite(v)))
                throw new InputProblemException(name, $"{v.ToString(CultureInfo.InvariantCulture)} is not a positive number of µm",
                    $"give {name} a size in µm greater than 0, e.g. {name} {buildPixelUm.ToString("0.###", CultureInfo.InvariantCulture)} (the build's)");
        double? planeUm = options.VoxelSizeUm ?? buildPlaneSpacingUm;
        if (asked is not double outUm || Math.Abs(outUm - buildPixelUm) <= 1e-9 * buildPixelUm)
        {
            CheckPlanes(nx, ny, planes, sectionSpacingUm, planeUm);
            return new ApplyGrid(nx, ny, buildPixelUm, Transform2D.Identity, atSections, planeUm);
        }
        double r = buildPixelUm / outUm;
        double gx = Math.Ceiling(nx * r - 1e-9), gy = Math.Ceiling(ny * r - 1e-9);
        if (!(Math.Max(gx, gy) <= NiftiFile.MaxVoxelsPerAxis))
            throw new InputProblemException(option,
                $"{outUm.ToString("0.###", CultureInfo.InvariantCulture)} µm over the build's {nx} × {ny} voxels of {buildPixelUm.ToString("0.###", CultureInfo.InvariantCulture)} µm would give {gx:0} × {gy:0} voxels in a plane, more than NIfTI-1 stores ({NiftiFile.MaxVoxelsPerAxis} per axis)",
                $"give {option} a size of at least {OutputGrid.RoundedUpUm(Math.Max(nx, ny) * buildPixelUm / NiftiFile.MaxVoxelsPerAxis)} µm");
        CheckPlanes((int)gx, (int)gy, planes, sectionSpacingUm, planeUm, option);
        var gridToBuild = Resampler.EdgeAlignedScale(1 / r);
        var a = atSections;
        double tx = gridToBuild.M02, ty = gridToBuild.M12, s = gridToBuild.M00;
        var affine = Geometry.Affine.FromRows(
            [a[0, 0] * s, a[0, 1] * s, a[0, 2], a[0, 3] + a[0, 0] * tx + a[0, 1] * ty],
            [a[1, 0] * s, a[1, 1] * s, a[1, 2], a[1, 3] + a[1, 0] * tx + a[1, 1] * ty],
            [a[2, 0] * s, a[2, 1] * s, a[2, 2], a[2, 3] + a[2, 0] * tx + a[2, 1] * ty]);
        return new ApplyGrid((int)gx, (int)gy, outUm, Resampler.EdgeAlignedScale(r), affine, planeUm);
    }


    /// <summary>Refuses a plane spacing that gives more planes than NIfTI-1 stores, or a volume over one array.</summary>
    private static void CheckPlanes(int nx, int ny, int planes, double sectionSpacingUm, double? planeUm, string sizeOption = "--output-pixel-size")
    {
        long count = planes;
        if (planeUm is double z && Math.Abs(z - sectionSpacingUm) > 1e-9 * z)
            count = (long)Math.Floor((planes - 1) * sectionSpacingUm / z + 1e-9) + 1;
        if (count > NiftiFile.MaxVoxelsPerAxis)
            throw new InputProblemException("--voxel-size",
                $"{planeUm!.Value.ToString("0.###", CultureInfo.InvariantCulture)} µm between planes would give {count} planes, more than NIfTI-1 stores ({NiftiFile.MaxVoxelsPerAxis})",
                $"give --voxel-size a size of at least {OutputGrid.RoundedUpUm((planes - 1) * sectionSpacingUm / (NiftiFile.MaxVoxelsPerAxis - 1))} µm");
        if ((long)nx * ny * Math.Max(count, planes) > Array.MaxLength)
            throw new InputProblemException(sizeOption, $"the volume would have {nx} × {ny} × {Math.Max(count, planes)} voxels, more than fits in memory",
                $"give {sizeOption} a larger size");
    }
}

/// <summary>What an image set's colour and pages become (<c>apply --channels</c>).</summary>
public enum ChannelOutput
{
    /// <summary>One gray volume: colour turned to gray as <see cref="GrayChannel"/> says; the first page of multi-page images.</summary>
    Gray,
    /// <summary>One colour volume (NIfTI-1 RGB24) of 8-bit colour images; the first page.</summary>
    Rgb,
    /// <summary>One volume per colour channel and per page.</summary>
    Split,
}

/// <summary>One volume of an applied image set: the page and the channel drawn, and the suffix its file name gets.</summary>
/// <param name="Suffix">Added to the output's base name ("" for the one volume of a gray, one-page set).</param>
/// <param name="Page">The page, from 0; null when the set is not split by pages.</param>
public sealed record ApplyChannel(string Suffix, GrayChannel Channel, int? Page);

/// <summary>Which volumes an image set gives under <see cref="ChannelOutput"/>, and the names they are written under.</summary>
public static class ApplyChannels
{
    /// <summary>
    /// The volumes to draw. <see cref="ChannelOutput.Gray"/>: one, gray by <paramref name="gray"/>.
    /// <see cref="ChannelOutput.Rgb"/>: red, green and blue, to be written as one RGB24 volume; refused (naming
    /// --channels) for gray images, and for 16-bit colour, which RGB24's 8 bits a channel would cut.
    /// <see cref="ChannelOutput.Split"/>: per page (when the files hold more than one: suffix <c>_pageN</c>, N from 1)
    /// and per colour channel (when any image is colour: <c>_red</c>, <c>_green</c>, <c>_blue</c>), in that order; every
    /// file must hold the same number of pages (counted by <see cref="SectionImageReader.PageCount"/>).
    /// </summary>
    public static IReadOnlyList<ApplyChannel> Plan(SectionSeries other, ChannelOutput mode, GrayChannel gray)
    {
        var present = other.Present.Where(s => s.Image is not null).ToList();
        bool colour = present.Any(s => s.Image!.Channels == 3);
        int bits = present.Count == 0 ? 8 : present.Max(s => s.Image!.BitsPerChannel);
        string where = other.ManifestPath ?? other.Folder;
        switch (mode)
        {
            case ChannelOutput.Gray:
                return [new ApplyChannel("", gray, null)];
            case ChannelOutput.Rgb:
                if (!colour)
                    throw new InputProblemException(where, "its images are gray, so there is no colour to keep",
                        "leave out --channels rgb (or give the colour images)");
                if (bits > 8)
                    throw new InputProblemException(where, "its colour images have 16 bits a channel, which an RGB24 volume (8 bits a channel) would cut",
                        "use --channels split to keep 16 bits in one volume per channel");
                return [.. Components.Select(c => new ApplyChannel("", c.Channel, null))];
        }
        int pages = 1;
        SectionEntry? first = null;
        foreach (var s in present.Where(s => s.FilePath is not null))
        {
            int count = SectionImageReader.PageCount(s.FilePath!);
            if (first is null) (first, pages) = (s, count);
            else if (count != pages)
                throw new InputProblemException(s.FilePath!, $"holds {count} page{(count == 1 ? "" : "s")}, but {Path.GetFileName(first.FilePath)} holds {pages}",
                    "give an image set whose files all hold the same pages, or leave out --channels split");
        }
        var channels = new List<ApplyChannel>();
        for (int p = 0; p < pages; p++)
        {
            string page = pages > 1 ? $"_page{p + 1}" : "";
            int? pageIndex = pages > 1 ? p : null;
            if (colour) channels.AddRange(Components.Select(c => new ApplyChannel(page + c.Suffix, c.Channel, pageIndex)));
            else channels.Add(new ApplyChannel(page, gray, pageIndex));
        }
        return channels;
    }

    private static readonly (GrayChannel Channel, string Suffix)[] Components =
        [(GrayChannel.Red, "_red"), (GrayChannel.Green, "_green"), (GrayChannel.Blue, "_blue")];
}

/// <summary>What <see cref="ApplyStage.Plan"/> decided for an applied volume, before anything is drawn.</summary>
/// <param name="BuildNx">The build's voxels along i.</param>
/// <param name="BuildNy">The build's voxels along j.</param>
/// <param name="BuildAffine">The build's affine as its sidecar stores it.</param>
/// <param name="Target">The grid drawn into.</param>
/// <param name="Planes">Planes at the section spacing.</param>
/// <param name="BuildResampling">The build's resampling along the stack, if any.</param>
/// <param name="BuildsGrid">Whether the grid is the build's own.</param>
/// <param name="Sections">Every section of the build, in order, with its image → plane map where it is drawn.</param>
/// <param name="Bits">The image set's bit depth (8 or 16).</param>
/// <param name="Missing">Sections the build placed that the image set has no image for.</param>
/// <param name="FieldMismatch">Sections whose image covers another field than the build's, with how many times as wide.</param>
/// <param name="Unplaced">Sections of the image set the build has no placement for.</param>
public sealed record ApplyPlan(BuildRecord Build, string SidecarPath, SectionSeries Other, int BuildNx, int BuildNy, Affine BuildAffine,
    ApplyGrid Target, int Planes, PlaneResampling? BuildResampling, bool BuildsGrid, List<RenderedSection> Sections, RenderSettings Settings,
    int Bits, List<int> Missing, List<(int Number, double Share)> FieldMismatch, List<int> Unplaced, GrayChannel Channel, int? Page);

/// <summary>An applied volume (intensities in the image set's own units), its record and the image set's bit depth.</summary>
public sealed record ApplyResult(Volume Volume, ApplyRecord Record, int InputBitDepth);

/// <summary>
/// Another image set of the same sections (another stain or channel, another export size) drawn through the placements a
/// build stored in its sidecar, into the same grid and affine as the build's volume. Nothing is registered again.
/// </summary>
public static class ApplyStage
{
    /// <summary>
    /// Matches the image set's sections to the sidecar's by number, scales each stored matrix (full-resolution input
    /// pixels → (i, j)) to the image set's pixel size, and draws them with the build's render
    /// (<see cref="RenderStage.RenderPlaced"/>): the same interpolation, gap fill and plane resampling the sidecar records.
    /// A section the build placed but the image set lacks is a gap, filled from its neighbours as the build fills gaps.
    /// </summary>
    /// <param name="sidecarPath">The sidecar's path, for messages and the record.</param>
    /// <param name="channel">How colour images become gray.</param>
    /// <param name="createdUtc">The run's time, for the record.</param>
    /// <param name="grid">Another voxel size to draw at (<see cref="ApplyGrid.For"/>); null keeps the build's grid.</param>
    /// <param name="page">Which page of multi-page images to draw, from 0 (see <see cref="ApplyChannels"/>); null reads the
    /// first page and records none.</param>
    public static ApplyResult Apply(BuildRecord build, string sidecarPath, SectionSeries other, ISectionImages images, GrayChannel channel,
        DateTime createdUtc, IProgress<string>? progress = null, ApplyGridOptions? grid = null, int? page = null)
    {
        var plan = Plan(build, sidecarPath, other, channel, grid, page);
        var rendered = RenderStage.RenderPlaced(plan.Sections, plan.Target.Nx, plan.Target.Ny, plan.Planes, plan.Target.Affine, plan.Settings, images, progress);
        var volume = rendered.Volume;
        var (record, affine) = Record(plan, rendered.Sections, volume.Nz, volume.Affine, createdUtc);
        volume.Affine = affine;
        return new ApplyResult(volume, record, plan.Bits);
    }

    /// <summary>
    /// As <see cref="Apply"/>, plane by plane: the finished planes go to the sink <paramref name="open"/> makes (given their
    /// count and the render's affine) and are not kept; returns the record, whose affine and dimensions are the volume's.
    /// </summary>
    public static ApplyRecord ApplyInto(ApplyPlan plan, ISectionImages images, Func<int, Affine, RenderStage.IPlaneSink> open, DateTime createdUtc,
        IProgress<string>? progress = null)
    {
        var (nx, ny) = (plan.Target.Nx, plan.Target.Ny);
        var streamed = RenderStage.RenderPlanes(plan.Sections, nx, ny, plan.Planes, plan.Target.Affine, plan.Settings,
            RenderStage.DrawFrom(images, plan.Settings, nx, ny), open, progress);
        return Record(plan, streamed.Sections, streamed.Planes, streamed.Affine, createdUtc).Record;
    }

    /// <summary>
    /// Everything <see cref="Apply"/> decides before it draws: the grid, each section's map from its image to its plane
    /// (null where nothing is drawn), the render's settings, the bit depth, and what the warnings report. Reads headers only.
    /// </summary>
    public static ApplyPlan Plan(BuildRecord build, string sidecarPath, SectionSeries other, GrayChannel channel, ApplyGridOptions? grid = null, int? page = null)
    {
        var (nx, ny, _, affine) = SidecarFile.Geometry(build, sidecarPath);
        var parameters = build.Parameters;
        if (!(parameters.OutputPixelSizeUm > 0) || !(build.SpacingUm > 0) || build.Sections.Count == 0)
            throw new InputProblemException(sidecarPath, "the sidecar has no output pixel size, section spacing or sections",
                "give the .json written beside the volume by 'stackbuild build', unedited");
        int planes = build.Sections.Max(s => s.ZIndex) + 1;
        var resampling = parameters.PlaneResampling;
        // The grid at the section spacing: the stored affine's k column, undone from any resampling along the stack.
        var atSections = resampling is { } r ? ScaleK(affine, r.FromUm / r.ToUm) : affine;
        var target = ApplyGrid.For(nx, ny, planes, parameters.OutputPixelSizeUm, atSections, resampling?.ToUm, build.SpacingUm, grid ?? new ApplyGridOptions());
        bool buildsGrid = target.Nx == nx && target.Ny == ny && target.BuildToGrid.Equals(Transform2D.Identity)
            && target.PlaneSpacingUm == resampling?.ToUm;
        var byNumber = other.Sections.ToDictionary(s => s.Number);
        var sections = new List<RenderedSection>();
        var missing = new List<int>();
        var fieldMismatch = new List<(int Number, double Share)>();
        foreach (var stored in build.Sections.OrderBy(s => s.Number))
        {
            byNumber.TryGetValue(stored.Number, out var entry);
            bool placed = stored.Status is SectionOutcome.Aligned or SectionOutcome.Placed && stored.Matrix is not null;
            bool hasImage = entry is { Status: SectionStatus.Present, Image: not null };
            if (placed && !hasImage) missing.Add(stored.Number);
            entry ??= new SectionEntry(stored.Number, null, stored.PositionUm, other.PixelSizeUm, SectionStatus.Gap, null, false, "", null);
            if (!placed || !hasImage)
            {
                var status = placed ? SectionOutcome.Gap : stored.Status;
                sections.Add(new RenderedSection(entry, null, stored.ZIndex, status, null));
                continue;
            }
            double storedUm = stored.PixelSizeUm ?? build.InputPixelSizeUm;
            if (OtherField(stored, storedUm, entry) is { } field) fieldMismatch.Add(field);
            var imageToPlane = ScaledMatrix(Transform2D.FromRows(stored.Matrix!), entry.PixelSizeUm / storedUm).Then(target.BuildToGrid);
            sections.Add(new RenderedSection(entry, null, stored.ZIndex, stored.Status, imageToPlane));
        }
        var placedNumbers = build.Sections.Where(s => s.Matrix is not null).Select(s => s.Number).ToHashSet();
        var unplaced = other.Present.Select(s => s.Number).Where(n => !placedNumbers.Contains(n)).ToList();
        if (!sections.Any(s => s.ImageToPlane is not null))
            throw new InputProblemException(other.ManifestPath ?? other.Folder,
                $"none of its sections has a placement in {Path.GetFileName(sidecarPath)} (the build placed sections {SectionNumbers.Runs(placedNumbers.Order())})",
                "give the images of the same sections, numbered as the build's were (or a manifest that numbers them)");

        int bits = sections.Where(s => s.ImageToPlane is not null).Max(s => s.Entry.Image!.BitsPerChannel);
        double maxValue = bits > 8 ? 65535 : 255;
        var fill = build.Aligned ? parameters.Fill : GapFill.None;
        var settings = new RenderSettings(target.OutputPixelUm, maxValue, channel, parameters.Interpolation, fill,
            build.SpacingUm, target.PlaneSpacingUm, page ?? 0);
        return new ApplyPlan(build, sidecarPath, other, nx, ny, affine, target, planes, resampling, buildsGrid, sections, settings, bits,
            missing, fieldMismatch, unplaced, channel, page);
    }

    /// <summary>
    /// The record of an applied volume drawn as <paramref name="plan"/> says, whose render gave <paramref name="sections"/>
    /// (with their fills), <paramref name="nz"/> planes and <paramref name="renderAffine"/>; and the volume's affine: the
    /// build's exactly when its grid was used (or its in-plane scaling), not one rebuilt through the resampling's scale.
    /// </summary>
    public static (ApplyRecord Record, Affine Affine) Record(ApplyPlan plan, IReadOnlyList<RenderedSection> sections, int nz, Affine renderAffine,
        DateTime createdUtc)
    {
        var (build, sidecarPath, other, target) = (plan.Build, plan.SidecarPath, plan.Other, plan.Target);
        var (resampling, buildsGrid, missing, fieldMismatch, unplaced) = (plan.BuildResampling, plan.BuildsGrid, plan.Missing, plan.FieldMismatch, plan.Unplaced);
        var (nx, ny, parameters, fill, bits) = (plan.BuildNx, plan.BuildNy, build.Parameters, plan.Settings.Fill, plan.Bits);
        var affine = renderAffine;
        if (target.PlaneSpacingUm == resampling?.ToUm)
        {
            if (nz != build.Dimensions[2])
                throw new InputProblemException(sidecarPath, $"its sections give {nz} planes, but it says the volume has {build.Dimensions[2]}",
                    "give the .json written beside the volume by 'stackbuild build', unedited");
            if (buildsGrid) affine = plan.BuildAffine;
            else if (resampling is { } z) affine = ScaleK(target.Affine, z.ToUm / z.FromUm);
        }

        var warnings = new List<string>(other.Warnings);
        if (missing.Count > 0)
            warnings.Add($"no image for section{(missing.Count == 1 ? "" : "s")} {SectionNumbers.Runs(missing)} (placed in the build); " +
                (fill == GapFill.None ? "left empty" : "filled from the neighbouring sections"));
        if (fieldMismatch.Count > 0)
        {
            var worst = fieldMismatch.MaxBy(f => Math.Abs(f.Share - 1));
            warnings.Add(string.Format(CultureInfo.InvariantCulture,
                "the images of section{0} {1} cover another field than the build's (section {2}: {3:0.###} times as wide at the pixel sizes given); check the pixel size (--pixel-size or the manifest) and that the images were exported whole",
                fieldMismatch.Count == 1 ? "" : "s", SectionNumbers.Runs(fieldMismatch.Select(f => f.Number)), worst.Number, worst.Share));
        }
        if (unplaced.Count > 0)
            warnings.Add($"section{(unplaced.Count == 1 ? "" : "s")} {SectionNumbers.Runs(unplaced)} of the image set {(unplaced.Count == 1 ? "has" : "have")} no placement in the build and {(unplaced.Count == 1 ? "was" : "were")} left out");
        var record = new ApplyRecord
        {
            Version = BuildPipeline.Version,
            Created = createdUtc.ToString("yyyy-MM-ddTHH:mm:ssZ", CultureInfo.InvariantCulture),
            PlacementsFrom = Path.GetFullPath(sidecarPath),
            Images = other.ManifestPath ?? other.Folder,
            Dimensions = [target.Nx, target.Ny, nz],
            VoxelSizeMm = [affine.VoxelSizes.I, affine.VoxelSizes.J, affine.VoxelSizes.K],
            Affine = affine.ToRows(),
            Grid = new AppliedGridRecord
            {
                Grid = buildsGrid ? "the build's" : "another voxel size over the build's extent",
                OutputPixelSizeUm = target.OutputPixelUm,
                PlaneSpacingUm = target.PlaneSpacingUm ?? build.SpacingUm,
                BuildOutputPixelSizeUm = parameters.OutputPixelSizeUm,
                BuildPlaneSpacingUm = resampling?.ToUm ?? build.SpacingUm,
                BuildDimensions = [nx, ny, build.Dimensions[2]],
                Kept = buildsGrid ? "every voxel where the build put it" : ApplyGrid.KeptWords,
            },
            PixelSizeUm = other.PixelSizeUm,
            BitDepth = bits,
            Channel = plan.Channel.ToString().ToLowerInvariant(),
            Page = plan.Page + 1,
            Interpolation = parameters.Interpolation.ToString().ToLowerInvariant(),
            Fill = fill.ToString().ToLowerInvariant(),
            MissingSections = missing,
            Warnings = warnings,
            Sections = sections.Select(s => new AppliedSectionRecord
            {
                Number = s.Entry.Number,
                File = s.Entry.FilePath is { } f ? Path.GetFileName(f) : null,
                Status = s.Status,
                ZIndex = s.Plane,
                PixelRatio = s.ImageToPlane is null ? null : s.Entry.PixelSizeUm / (build.Sections.First(b => b.Number == s.Entry.Number).PixelSizeUm ?? build.InputPixelSizeUm),
                Matrix = s.ImageToPlane?.ToRows(),
                Filled = s.Filled?.ToString().ToLowerInvariant(),
                FilledFrom = s.FilledFrom,
            }).ToList(),
        };
        return (record, affine);
    }

    /// <summary>
    /// Opens the other image set with the series reader's own rules (file-name numbering, or its manifest), its pixel
    /// size from <paramref name="options"/>, its manifest or its files, as <c>build</c> finds it. The section spacing is
    /// the build's: the planes come from the sidecar, so the other set need not state it.
    /// </summary>
    public static SectionSeries OpenImages(string folderOrManifest, BuildRecord build, SeriesOptions options) =>
        SeriesReader.Open(folderOrManifest, options with { SpacingUm = options.SpacingUm ?? (build.SpacingUm > 0 ? build.SpacingUm : null) });

    /// <summary>
    /// How many times as wide the other image's field is as the one the build read (pixels × pixel size), when the two
    /// differ by more than <see cref="FieldTolerance"/> or a pixel; null when they agree or the sidecar did not record the size.
    /// </summary>
    private static (int Number, double Share)? OtherField(SectionRecord stored, double storedUm, SectionEntry other)
    {
        if (stored.ImageSizePx is not [int width, int height] || width <= 0 || height <= 0 || other.Image is not { } facts) return null;
        double share = facts.Width * other.PixelSizeUm / (width * storedUm);
        double shareY = facts.Height * other.PixelSizeUm / (height * storedUm);
        double slack = FieldTolerance + 1.0 / Math.Min(width, height);
        return Math.Abs(share - 1) > slack || Math.Abs(shareY - 1) > slack ? (stored.Number, Math.Abs(share - 1) >= Math.Abs(shareY - 1) ? share : shareY) : null;
    }

    /// <summary>Share by which another image set's field may differ from the build's before apply warns (an export's rounding).</summary>
    public const double FieldTolerance = 0.02;

    /// <summary>
    /// A stored map from one image's pixels to the plane, re-expressed for an image of the same field whose pixels are
    /// <paramref name="ratio"/> times as large (pixel edges kept, as a scanner's export at another size keeps them).
    /// </summary>
    public static Transform2D ScaledMatrix(Transform2D storedToPlane, double ratio) =>
        Resampler.EdgeAlignedScale(ratio).Then(storedToPlane);

    private static Affine ScaleK(Affine a, double factor) =>
        Affine.FromRows([a[0, 0], a[0, 1], a[0, 2] * factor, a[0, 3]], [a[1, 0], a[1, 1], a[1, 2] * factor, a[1, 3]],
            [a[2, 0], a[2, 1], a[2, 2] * factor, a[2, 3]]);
}
