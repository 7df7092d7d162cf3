using System.Globalization;
using StackBuild.Series;
using StackBuild.IO;
using StackBuild.Template;

namespace StackBuild.Pipeline;

/// <summary>
/// Stage 1, the series plan: what will be built and at which sizes, decided from the series' headers and the options
/// before any pixel is read.
/// </summary>
/// <param name="Present">The sections with an image to use, in series order.</param>
/// <param name="InputBitDepth">Largest bits per channel of the present sections (8 or 16).</param>
/// <param name="LargestUm">Longest side of any present section, in µm.</param>
/// <param name="OutputPixelUm">In-plane voxel size of the output, µm.</param>
/// <param name="PlaneSpacingUm">A plane spacing the volume is resampled to at the end; null = the section spacing.</param>
/// <param name="TemplateGrid">True when the output takes the template's own lattice.</param>
public sealed record SeriesPlan(BuildOptions Options, SectionSeries Series, IReadOnlyList<SectionEntry> Present, TemplateVolume? Template,
    int InputBitDepth, double LargestUm, double OutputPixelUm, double? PlaneSpacingUm, bool TemplateGrid)
{
    /// <summary>The largest intensity of the input's bit depth (and of the output volume).</summary>
    public double MaxValue => InputBitDepth > 8 ? 65535 : 255;
}

public static class PlanStage
{
    /// <summary>
    /// Refuses, before any image or template is read, a build whose options do not fit the series: no section to
    /// build, a --reference without an image, frame options combined with a template.
    /// </summary>
    public static void Check(BuildOptions options, SectionSeries series)
    {
        if (!Present(series).Any())
            throw new InputProblemException(options.Input, "the series has no sections to build (all are gaps or excluded)",
                "check the manifest's exclude column and the file names");
        CheckReferenceSection(options, series);
        if (options.Template is not null) CheckTemplateCombination(options);
    }

    /// <summary>
    /// Chooses the output sizes after <see cref="Check"/>, with the template already loaded (null without one), and
    /// refuses a template the sections do not fall inside. Pure: throws <see cref="InputProblemException"/> for a
    /// build that cannot be done, before any registration.
    /// </summary>
    public static SeriesPlan Plan(BuildOptions options, SectionSeries series, TemplateVolume? template)
    {
        var present = Present(series).ToList();
        if (options.Template is { } templateOptions)
            CheckTemplateDepths(template ?? throw new ArgumentException("the template options need the template volume", nameof(template)),
                templateOptions, series, present);
        else template = null;
        int bits = present.Max(s => s.Image!.BitsPerChannel);
        double largestUm = present.Max(s => Math.Max(s.Image!.Width, s.Image!.Height) * s.PixelSizeUm);
        bool templateGrid = template is not null && options.Template!.TemplateGrid;
        double? zSpacingUm = options.VoxelSizeUm ?? (templateGrid ? template!.PlaneSpacingMm * 1000 : null);
        double? planeUm = options.OutputPixelSizeUm ?? options.VoxelSizeUm
            ?? (templateGrid ? Math.Min(template!.PixelWidthMm, template.PixelHeightMm) * 1000 : null);
        double outUm = planeUm ?? series.PixelSizeUm;
        if (planeUm is null && largestUm / outUm > options.MaxPlaneSide)
            outUm = largestUm / options.MaxPlaneSide;
        return new SeriesPlan(options, series, present, template, bits, largestUm, outUm, zSpacingUm, templateGrid);
    }

    private static IEnumerable<SectionEntry> Present(SectionSeries series) =>
        series.Sections.Where(s => s.Status == SectionStatus.Present && s.Image is not null);

    /// <summary>Refuses a --reference that names no section with an image, before any work is done.</summary>
    private static void CheckReferenceSection(BuildOptions options, SectionSeries series)
    {
        if (options.Frame.ReferenceSection is not int wanted) return;
        var entry = series.Sections.FirstOrDefault(s => s.Number == wanted);
        string first = series.Sections.FirstOrDefault(s => s.Status == SectionStatus.Present)?.Number.ToString(CultureInfo.InvariantCulture) ?? "?";
        if (entry is null)
            throw new InputProblemException(options.Input, $"--reference {wanted}: the series has no section {wanted} (its sections run from {series.Sections[0].Number} to {series.Sections[^1].Number})",
                $"give the number of a section that was scanned, e.g. --reference {first}");
        if (entry.Status != SectionStatus.Present || entry.Image is null)
            throw new InputProblemException(options.Input, $"--reference {wanted}: section {wanted} is {(entry.Status == SectionStatus.Excluded ? "excluded" : "missing")}, so it has no image to take the frame from",
                $"give the number of a section that was scanned, e.g. --reference {first}");
    }

    /// <summary>With a template the frame is the template's: the options that choose a frame are refused, not ignored.</summary>
    private static void CheckTemplateCombination(BuildOptions options)
    {
        var f = options.Frame;
        var clash = new List<string>();
        if (f.ReferenceSection is not null) clash.Add("--reference");
        if (f.RotateDegrees != 0) clash.Add("--rotate");
        if (f.Mirror) clash.Add("--mirror");
        if (f.Upright) clash.Add("--upright");
        if (f.CentreMm != default) clash.Add("--centre");
        if (!options.Align) clash.Add("--no-align");
        if (clash.Count > 0)
            throw new InputProblemException(options.Template!.Path, $"{string.Join(", ", clash)} cannot be combined with --template: the template decides the frame",
                $"leave out {string.Join(" and ", clash)}, or build without --template");
    }

    /// <summary>Refuses a template the sections do not fall inside (fewer than three, or fewer than all when there are fewer than three).</summary>
    private static void CheckTemplateDepths(TemplateVolume template, TemplateOptions o, SectionSeries series, IReadOnlyList<SectionEntry> present)
    {
        var (firstPlane, direction) = TemplateStage.TemplateDepths(template, o, series);
        double first = series.Sections[0].PositionUm;
        var z = present.Select(s => firstPlane + direction * (s.PositionUm - first) / 1000 / template.PlaneSpacingMm).ToArray();
        int inside = z.Count(template.ContainsPlane);
        if (inside < Math.Min(3, present.Count))
            throw new InputProblemException(o.Path,
                $"only {inside} of {present.Count} sections fall inside the template: they lie at template planes {z.Min():0.#} to {z.Max():0.#} along axis {o.CutAxis}, and the template has planes 0 to {template.Planes - 1} ({template.PlaneSpacingMm:0.###} mm apart)",
                "check --template-axis (the template's axis the sections were cut along), --template-first-plane and the section spacing");
    }
}
