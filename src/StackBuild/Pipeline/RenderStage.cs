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
        var rendered = RenderPlaced(placed, grid.Nx, grid.Ny, grid.Nz, grid.Affine, settings, images, progress);
        return rendered with { Warnings = warnings };
    }

    /// <summary>
    /// Draws sections whose placements are already known into a volume (at the section spacing):
    /// every section with status aligned or placed is read through <paramref name="images"/> at the size the output
    /// needs and resampled through its <see cref="RenderedSection.ImageToPlane"/> into its plane; then the planes no
    /// section was drawn into are filled (<see cref="RenderSettings.Fill"/>), the planes are resampled along the stack
    /// when <see cref="RenderSettings.PlaneSpacingUm"/> asks, and the voxels are rounded to the input's levels. The build
    /// calls it with the placements it solved, <c>apply</c> with those a sidecar stored. The volume is held in memory; see
    /// <see cref="RenderPlanes"/> for the same render plane by plane.
    /// </summary>
    /// <param name="sections">One per section of the series, in order; their plane k is at the section spacing.</param>
    /// <param name="nx">Voxels along i.</param>
    /// <param name="ny">Voxels along j.</param>
    /// <param name="nz">Planes at the section spacing.</param>
    /// <param name="affine">The grid's affine at the section spacing.</param>
    public static RenderedVolume RenderPlaced(IReadOnlyList<RenderedSection> sections, int nx, int ny, int nz, Affine affine, RenderSettings settings,
        ISectionImages images, IProgress<string>? progress)
    {
        VolumeSink? sink = null;
        var streamed = RenderPlanes(sections, nx, ny, nz, affine, settings, DrawFrom(images, settings, nx, ny),
            (count, outAffine) => sink = new VolumeSink(new Volume(nx, ny, count, outAffine)), progress);
        return new RenderedVolume(sink!.Volume, streamed.Sections, streamed.Fill, streamed.Resampling, []);
    }

    /// <summary>Draws one section into its (empty) plane; returns false when it has nothing to draw.</summary>
    public delegate bool DrawSection(RenderedSection section, Span<float> plane);

    /// <summary>Receives the finished planes (filled, resampled, rounded) in order, k = 0, 1, …</summary>
    public interface IPlaneSink
    {
        void Accept(int k, ReadOnlySpan<float> plane);
    }

    /// <summary>The planes kept in a <see cref="Volume"/>.</summary>
    public sealed class VolumeSink(Volume volume) : IPlaneSink
    {
        public Volume Volume { get; } = volume;
        public void Accept(int k, ReadOnlySpan<float> plane) => plane.CopyTo(Volume.Plane(k));
    }

    /// <summary>What <see cref="RenderPlanes"/> did: each section's record (fills added), the fill, the resampling and the
    /// finished volume's plane count and affine.</summary>
    public sealed record StreamedVolume(IReadOnlyList<RenderedSection> Sections, GapFill Fill, PlaneResampling? Resampling, int Planes, Affine Affine);

    /// <summary>
    /// Draws a section from its image: read through <paramref name="images"/> at the size the output needs, scaled to the
    /// input's levels and resampled through its <see cref="RenderedSection.ImageToPlane"/>, outside the image its border's
    /// median (the slide).
    /// </summary>
    /// <remarks>Each section's pixels are read into the array of the section before when the sizes agree: a series of large
    /// sections of one size then holds one section's pixels, not as many as the collector has not yet let go of (measured
    /// in docs/benchmarks.md).</remarks>
    public static DrawSection DrawFrom(ISectionImages images, RenderSettings settings, int nx, int ny)
    {
        float[]? spare = null;
        return (r, plane) =>
        {
            if (r.ImageToPlane is not { } imageToPlane) return false;
            var s = r.Entry;
            var full = s.Image!;
            double scale = s.PixelSizeUm / settings.OutputPixelUm;
            int? loadSide = scale < 1 ? Math.Max(1, (int)Math.Ceiling(Math.Max(full.Width, full.Height) * scale)) : null;
            var loaded = images.Read(s, new ImageReadOptions { Channel = settings.Channel, MaxLongSide = loadSide, Page = settings.Page, Reuse = spare });
            spare = null;
            var image = loaded.Image;
            float fill = (float)(image.BorderMedian() * settings.MaxValue);
            ScaleInPlace(image, (float)settings.MaxValue);
            var planeToImage = imageToPlane.Inverse().Then(Resampler.FullToBlockReduced((int)loaded.Downsample));
            Resampler.Warp(image, planeToImage, plane, nx, ny, fill, settings.Interpolation);
            spare = image.Pixels;
            return true;
        };
    }

    /// <summary>
    /// The render of <see cref="RenderPlaced"/> plane by plane, in order, without holding the volume: each drawn plane is
    /// made by <paramref name="draw"/> when it is first needed, a gap plane from the nearest drawn planes on either side
    /// (<see cref="GapFiller"/>), a resampled plane from the two planes around it (<see cref="ZResampler.PlaneAt"/>), and
    /// each finished plane is rounded to the input's levels and handed to the sink <paramref name="open"/> makes (given the
    /// finished plane count and affine) before the next is made. At most five planes are held at a time (the drawn planes
    /// below and above a gap, the plane being filled, the plane before for resampling, the rounded copy), besides what
    /// <paramref name="draw"/> holds while it draws. The result is the same, voxel for voxel, as filling and resampling
    /// the whole volume.
    /// </summary>
    /// <param name="nz">Planes at the section spacing.</param>
    /// <param name="affine">The volume's affine at the section spacing.</param>
    public static StreamedVolume RenderPlanes(IReadOnlyList<RenderedSection> sections, int nx, int ny, int nz, Affine affine,
        RenderSettings settings, DrawSection draw, Func<int, Affine, IPlaneSink> open, IProgress<string>? progress)
    {
        var rendered = sections.ToList();
        int length = checked(nx * ny);
        // Planes a section is drawn into ("good" for the gap fill), and the section drawn there (the last, as later overwrite).
        var good = new SortedSet<int>(rendered.Where(IsDrawn).Select(r => r.Plane));
        var drawnAt = new Dictionary<int, int>();
        for (int i = 0; i < rendered.Count; i++)
            if (IsDrawn(rendered[i]) && rendered[i].ImageToPlane is not null) drawnAt[rendered[i].Plane] = i;
        var gapEntries = rendered.Select((r, i) => (r, i)).Where(x => !IsDrawn(x.r) && !good.Contains(x.r.Plane))
            .GroupBy(x => x.r.Plane).ToDictionary(g => g.Key, g => g.Select(x => x.i).ToList());
        int total = drawnAt.Count, count = 0;

        var (planes, scale, outAffine, resampling) = FinishedPlanes(nx, ny, nz, affine, settings);
        var method = resampling?.Method ?? GapFill.Linear;
        var sink = open(planes, outAffine);

        // Plane buffers are reused rather than left to the collector: at a large grid each is hundreds of MB, and freed
        // ones would wait for a full collection while new ones are taken (measured, docs/benchmarks.md).
        var free = new Stack<float[]>();
        var inUse = new List<float[]>();
        // Drawn planes by k, kept while a later plane may need them (the gap fill's below and above).
        var drawn = new Dictionary<int, float[]>();
        float[] Rent()
        {
            var plane = free.Count > 0 ? free.Pop() : new float[length];
            Array.Clear(plane);
            inUse.Add(plane);
            return plane;
        }
        void ReleaseAllBut(params float[]?[] keep)
        {
            for (int i = inUse.Count - 1; i >= 0; i--)
                if (!keep.Contains(inUse[i]) && !drawn.ContainsValue(inUse[i]))
                {
                    free.Push(inUse[i]);
                    inUse.RemoveAt(i);
                }
        }

        float[] Drawn(int k)
        {
            if (drawn.TryGetValue(k, out var plane)) return plane;
            plane = Rent();
            if (drawnAt.TryGetValue(k, out int i))
            {
                var r = rendered[i];
                if (draw(r, plane)) progress?.Report($"rendering: section {r.Entry.Number} ({++count}/{total})");
            }
            drawn[k] = plane;
            return plane;
        }

        var rounded = new float[length];
        float max = (float)settings.MaxValue;
        void Emit(int m, ReadOnlySpan<float> plane)
        {
            plane.CopyTo(rounded);
            RoundInPlace(rounded, max);
            sink.Accept(m, rounded);
        }

        float[]? before = null; // plane k − 1, finished, for the resampling
        int next = 0;           // the next output plane
        for (int k = 0; k < nz; k++)
        {
            float[] plane;
            if (good.Contains(k)) plane = Drawn(k);
            else
            {
                plane = Rent();
                if (settings.Fill != GapFill.None && gapEntries.TryGetValue(k, out var entries))
                {
                    int below = good.GetViewBetween(int.MinValue, k).DefaultIfEmpty(-1).Max();
                    int above = good.GetViewBetween(k, int.MaxValue).DefaultIfEmpty(-1).Min();
                    if (below >= 0 && above >= 0)
                    {
                        double t = (k - below) / (double)(above - below);
                        GapFiller.InterpolateInto(Drawn(below), Drawn(above), nx, ny, t, settings.Fill, plane);
                        int from = rendered.First(x => x.Plane == below && IsDrawn(x)).Entry.Number;
                        int to = rendered.First(x => x.Plane == above && IsDrawn(x)).Entry.Number;
                        foreach (int i in entries) rendered[i] = rendered[i] with { Filled = settings.Fill, FilledFrom = [from, to] };
                    }
                }
            }
            // Drawn planes no later gap can need (below the newest drawn plane at or before k) are let go.
            foreach (int old in drawn.Keys.Where(d => d < k && good.GetViewBetween(d + 1, k).Count > 0).ToList()) drawn.Remove(old);

            if (resampling is null) Emit(k, plane);
            else
            {
                // Every output plane whose sources are now finished: below it k − 1 and k, or k alone.
                while (next < planes)
                {
                    var (below, needsNext) = ZResampler.Sources(next, scale, nz);
                    if (below > k || below == k && needsNext) break;
                    var (a, b) = (below == k ? plane : before!, below + 1 == k ? plane : null);
                    var target = Rent();
                    ZResampler.PlaneAt(next, scale, nz, j => j == below ? a : b, target, nx, ny, method);
                    Emit(next++, target);
                    inUse.Remove(target);
                    free.Push(target);
                }
            }
            before = resampling is null ? null : plane; // kept only for the resampling
            ReleaseAllBut(before);
        }
        return new StreamedVolume(rendered, settings.Fill, resampling, planes, outAffine);
    }

    /// <summary>
    /// How many planes a render of <paramref name="nz"/> planes at the section spacing finishes with, the step in section
    /// planes between them, their affine, and the resampling along the stack (null when the planes stay at the section
    /// spacing): a requested plane spacing resamples with the gap fill's method, linear when gaps are not filled.
    /// </summary>
    public static (int Planes, double Scale, Affine Affine, PlaneResampling? Resampling) FinishedPlanes(int nx, int ny, int nz, Affine affine,
        RenderSettings settings)
    {
        if (settings.PlaneSpacingUm is not double voxelUm || Math.Abs(voxelUm - settings.SectionSpacingUm) <= 1e-9 * voxelUm)
            return (nz, 1, affine, null);
        var (planes, scale, outAffine) = ZResampler.Plan(nx, ny, nz, affine, voxelUm / 1000);
        var method = settings.Fill != GapFill.None ? settings.Fill : GapFill.Linear;
        return (planes, scale, outAffine, new PlaneResampling(method, settings.SectionSpacingUm, voxelUm));
    }

    private static bool IsDrawn(RenderedSection r) => r.Status is SectionOutcome.Aligned or SectionOutcome.Placed;

    private static void ScaleInPlace(GrayImage image, float factor)
    {
        var p = image.Pixels;
        for (int i = 0; i < p.Length; i++) p[i] *= factor;
    }

    private static void RoundInPlace(Span<float> values, float max)
    {
        for (int i = 0; i < values.Length; i++) values[i] = Math.Clamp(MathF.Round(values[i]), 0, max);
    }
}
