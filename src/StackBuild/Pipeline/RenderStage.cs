using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Render;
using StackBuild.Series;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>What became of one section of the series in the volume.</summary>
/// <param name="Index">Its index among the prepared sections; null for a gap or an excluded section.</param>
/// <param name="Plane">Its plane k at the section spacing.</param>
/// <param name="ImageToPlane">Full-resolution input pixels → (i, j) of its plane; null when it was not rendered.</param>
/// <param name="Filled">How its plane was filled from its neighbours; null when it was not.</param>
/// <param name="FilledFrom">The two rendered sections the fill was interpolated between.</param>
public sealed record RenderedSection(SectionEntry Entry, int? Index, int Plane, SectionOutcome Status, Transform2D? ImageToPlane,
    GapFill? Filled = null, int[]? FilledFrom = null);

/// <summary>Stage 7, the volume: every placed section resampled into the grid, gaps filled, planes resampled, rounded to the input's levels.</summary>
/// <param name="Sections">One per section of the series, in order.</param>
/// <param name="Fill">How gap planes were filled (<see cref="GapFill.None"/> for an unaligned build).</param>
/// <param name="Resampling">How the planes were resampled along the stack; null when they stayed at the section spacing.</param>
public sealed record RenderedVolume(Volume Volume, IReadOnlyList<RenderedSection> Sections, GapFill Fill, PlaneResampling? Resampling,
    IReadOnlyList<string> Warnings);

/// <summary>How placed sections are drawn into a volume: the numbers a build's plan decided, or a sidecar stored.</summary>
/// <param name="OutputPixelUm">In-plane voxel size, µm.</param>
/// <param name="MaxValue">The largest intensity of the input's bit depth (255 or 65535).</param>
/// <param name="Fill">How empty planes are filled; <see cref="GapFill.None"/> leaves them empty (and always for an unaligned volume).</param>
/// <param name="SectionSpacingUm">The series' distance between consecutive planes k, µm.</param>
/// <param name="PlaneSpacingUm">A plane spacing to resample to at the end, µm; null = the section spacing.</param>
/// <param name="Page">Which page of multi-page images to read (0 = the first).</param>
public sealed record RenderSettings(double OutputPixelUm, double MaxValue, GrayChannel Channel, Interpolation Interpolation, GapFill Fill,
    double SectionSpacingUm, double? PlaneSpacingUm, int Page = 0);

public static class RenderStage
{
    /// <summary>
    /// Renders every placed section at the output resolution, reading each through <paramref name="images"/> at the
    /// size the output needs, then fills gap planes and resamples along the stack as asked.
    /// </summary>
    public static RenderedVolume Render(SeriesPlan plan, PreparedSections sections, FramedPlacements framed, OutputGrid grid,
        ISectionImages images, IProgress<string>? progress)
    {
        var options = plan.Options;
        var chain = framed.Placements.Chain;
        bool aligned = framed.Placements.Aligned;
        var warnings = new List<string>();
        var placed = new List<RenderedSection>();
        var occupied = new Dictionary<int, int>();
        var index = sections.Sections.Select((w, n) => (w.Entry.Number, n)).ToDictionary(t => t.Number, t => t.n);
        foreach (var s in plan.Series.Sections)
        {
            int k = grid.PlaneOf[s.Number];
            if (!index.TryGetValue(s.Number, out int n))
            {
                placed.Add(new RenderedSection(s, null, k, s.Status == SectionStatus.Excluded ? SectionOutcome.Excluded : SectionOutcome.Gap, null));
                continue;
            }
            var place = chain[n];
            if (place.Route == LinkRoute.Failed)
            {
                placed.Add(new RenderedSection(s, n, k, SectionOutcome.Failed, null));
                continue;
            }
            if (occupied.TryGetValue(k, out int other))
                warnings.Add($"sections {other} and {s.Number} fall on the same plane {k}; the later one is kept — check the positions or the spacing");
            occupied[k] = s.Number;
            var imageToPlane = grid.ImageToPlane(sections[n].FullToWork, place.ToReference);
            placed.Add(new RenderedSection(s, n, k, aligned ? SectionOutcome.Aligned : SectionOutcome.Placed, imageToPlane));
        }
        var settings = new RenderSettings(plan.OutputPixelUm, plan.MaxValue, options.Channel, options.Interpolation,
            aligned ? options.Fill : GapFill.None, plan.Series.SpacingUm, plan.PlaneSpacingUm);
        var rendered = RenderPlaced(placed, new Volume(grid.Nx, grid.Ny, grid.Nz, grid.Affine), settings, images, progress);
        return rendered with { Warnings = warnings };
    }

    /// <summary>
    /// Draws sections whose placements are already known into <paramref name="volume"/> (empty, at the section spacing):
    /// every section with status aligned or placed is read through <paramref name="images"/> at the size the output
    /// needs and resampled through its <see cref="RenderedSection.ImageToPlane"/> into its plane; then the planes no
    /// section was drawn into are filled (<see cref="RenderSettings.Fill"/>), the planes are resampled along the stack
    /// when <see cref="RenderSettings.PlaneSpacingUm"/> asks, and the voxels are rounded to the input's levels. The build
    /// calls it with the placements it solved, <c>apply</c> with those a sidecar stored.
    /// </summary>
    /// <param name="sections">One per section of the series, in order; their plane k is at the section spacing.</param>
    public static RenderedVolume RenderPlaced(IReadOnlyList<RenderedSection> sections, Volume volume, RenderSettings settings,
        ISectionImages images, IProgress<string>? progress)
    {
        var rendered = sections.ToList();
        int total = rendered.Count(r => r.ImageToPlane is not null && IsDrawn(r)), count = 0;
        foreach (var r in rendered)
        {
            if (r.ImageToPlane is not { } imageToPlane || !IsDrawn(r)) continue;
            var s = r.Entry;
            var full = s.Image!;
            double scale = s.PixelSizeUm / settings.OutputPixelUm;
            int? loadSide = scale < 1 ? Math.Max(1, (int)Math.Ceiling(Math.Max(full.Width, full.Height) * scale)) : null;
            var loaded = images.Read(s, new ImageReadOptions { Channel = settings.Channel, MaxLongSide = loadSide, Page = settings.Page });
            var image = loaded.Image;
            float fill = (float)(image.BorderMedian() * settings.MaxValue);
            ScaleInPlace(image, (float)settings.MaxValue);
            StackRenderer.RenderSection(volume, r.Plane, imageToPlane, image,
                Resampler.FullToBlockReduced((int)loaded.Downsample), fill, settings.Interpolation);
            progress?.Report($"rendering: section {s.Number} ({++count}/{total})");
        }
        // Only aligned planes are interpolated between: in a volume placed as scanned the neighbours do not line up.
        if (settings.Fill != GapFill.None) FillGaps(volume, rendered, settings.Fill);
        // A requested plane spacing: resample along the sections with the same interpolation as the gaps.
        PlaneResampling? resampling = null;
        if (settings.PlaneSpacingUm is double voxelUm && Math.Abs(voxelUm - settings.SectionSpacingUm) > 1e-9 * voxelUm)
        {
            var method = settings.Fill != GapFill.None ? settings.Fill : GapFill.Linear;
            volume = ZResampler.ResampleZ(volume, voxelUm / 1000, method);
            resampling = new PlaneResampling(method, settings.SectionSpacingUm, voxelUm);
        }
        RoundInPlace(volume.Voxels, (float)settings.MaxValue);
        return new RenderedVolume(volume, rendered, settings.Fill, resampling, []);
    }

    private static bool IsDrawn(RenderedSection r) => r.Status is SectionOutcome.Aligned or SectionOutcome.Placed;

    /// <summary>Fills every plane no section was rendered into from the nearest rendered planes on either side.</summary>
    private static void FillGaps(Volume volume, List<RenderedSection> rendered, GapFill method)
    {
        var good = rendered.Where(IsDrawn).Select(r => r.Plane).ToHashSet();
        for (int r = 0; r < rendered.Count; r++)
        {
            var section = rendered[r];
            if (IsDrawn(section) || good.Contains(section.Plane)) continue;
            int below = good.Where(z => z < section.Plane).DefaultIfEmpty(-1).Max();
            int above = good.Where(z => z > section.Plane).DefaultIfEmpty(-1).Min();
            if (below < 0 || above < 0) continue;
            double t = (section.Plane - below) / (double)(above - below);
            var plane = GapFiller.Interpolate(volume.Plane(below), volume.Plane(above), volume.Nx, volume.Ny, t, method);
            plane.CopyTo(volume.Plane(section.Plane));
            int from = rendered.First(x => x.Plane == below && IsDrawn(x)).Entry.Number;
            int to = rendered.First(x => x.Plane == above && IsDrawn(x)).Entry.Number;
            rendered[r] = section with { Filled = method, FilledFrom = [from, to] };
        }
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
