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
        var series = plan.Series;
        var chain = framed.Placements.Chain;
        bool aligned = framed.Placements.Aligned;
        double outUm = plan.OutputPixelUm, maxValue = plan.MaxValue;
        var warnings = new List<string>();
        var volume = new Volume(grid.Nx, grid.Ny, grid.Nz, grid.Affine);
        var rendered = new List<RenderedSection>();
        var occupied = new Dictionary<int, int>();
        var index = sections.Sections.Select((w, n) => (w.Entry.Number, n)).ToDictionary(t => t.Number, t => t.n);
        int count = 0;
        foreach (var s in series.Sections)
        {
            int k = grid.PlaneOf[s.Number];
            if (!index.TryGetValue(s.Number, out int n))
            {
                rendered.Add(new RenderedSection(s, null, k, s.Status == SectionStatus.Excluded ? SectionOutcome.Excluded : SectionOutcome.Gap, null));
                continue;
            }
            var place = chain[n];
            if (place.Route == LinkRoute.Failed)
            {
                rendered.Add(new RenderedSection(s, n, k, SectionOutcome.Failed, null));
                continue;
            }
            if (occupied.TryGetValue(k, out int other))
                warnings.Add($"sections {other} and {s.Number} fall on the same plane {k}; the later one is kept — check the positions or the spacing");
            occupied[k] = s.Number;

            var imageToPlane = grid.ImageToPlane(sections[n].FullToWork, place.ToReference);
            var full = s.Image!;
            double scale = s.PixelSizeUm / outUm;
            int? loadSide = scale < 1 ? Math.Max(1, (int)Math.Ceiling(Math.Max(full.Width, full.Height) * scale)) : null;
            var loaded = images.Read(s, new ImageReadOptions { Channel = options.Channel, MaxLongSide = loadSide });
            var image = loaded.Image;
            float fill = (float)(image.BorderMedian() * maxValue);
            ScaleInPlace(image, (float)maxValue);
            StackRenderer.RenderSection(volume, k, imageToPlane, image,
                Resampler.FullToBlockReduced((int)loaded.Downsample), fill, options.Interpolation);
            rendered.Add(new RenderedSection(s, n, k, aligned ? SectionOutcome.Aligned : SectionOutcome.Placed, imageToPlane));
            progress?.Report($"rendering: section {s.Number} ({++count}/{sections.Count})");
        }
        // Only aligned planes are interpolated between: in a volume placed as scanned the neighbours do not line up.
        var fillMethod = aligned ? options.Fill : GapFill.None;
        if (fillMethod != GapFill.None) FillGaps(volume, rendered, fillMethod);
        // A requested plane spacing: resample along the sections with the same interpolation as the gaps.
        PlaneResampling? resampling = null;
        if (plan.PlaneSpacingUm is double voxelUm && Math.Abs(voxelUm - series.SpacingUm) > 1e-9 * voxelUm)
        {
            var method = aligned && options.Fill != GapFill.None ? options.Fill : GapFill.Linear;
            volume = ZResampler.ResampleZ(volume, voxelUm / 1000, method);
            resampling = new PlaneResampling(method, series.SpacingUm, voxelUm);
        }
        RoundInPlace(volume.Voxels, (float)maxValue);
        return new RenderedVolume(volume, rendered, fillMethod, resampling, warnings);
    }

    /// <summary>Fills every plane no section was rendered into from the nearest rendered planes on either side.</summary>
    private static void FillGaps(Volume volume, List<RenderedSection> rendered, GapFill method)
    {
        static bool Rendered(RenderedSection r) => r.Status is SectionOutcome.Aligned or SectionOutcome.Placed;
        var good = rendered.Where(Rendered).Select(r => r.Plane).ToHashSet();
        for (int r = 0; r < rendered.Count; r++)
        {
            var section = rendered[r];
            if (Rendered(section) || good.Contains(section.Plane)) continue;
            int below = good.Where(z => z < section.Plane).DefaultIfEmpty(-1).Max();
            int above = good.Where(z => z > section.Plane).DefaultIfEmpty(-1).Min();
            if (below < 0 || above < 0) continue;
            double t = (section.Plane - below) / (double)(above - below);
            var plane = GapFiller.Interpolate(volume.Plane(below), volume.Plane(above), volume.Nx, volume.Ny, t, method);
            plane.CopyTo(volume.Plane(section.Plane));
            int from = rendered.First(x => x.Plane == below && Rendered(x)).Entry.Number;
            int to = rendered.First(x => x.Plane == above && Rendered(x)).Entry.Number;
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
