using System.Reflection;
using StackBuild.Frame;
using StackBuild.Imaging;
using StackBuild.Series;
using StackBuild.Template;

namespace StackBuild.Pipeline;

/// <summary>
/// series → register → solve → render: the whole build as a chain of stages, each a function from the records before
/// it to one new record (docs/architecture.md). Files are opened only here, at the edge, and through
/// <see cref="ISectionImages"/>.
/// </summary>
public static class BuildPipeline
{
    public static string Version =>
        typeof(BuildPipeline).Assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion.Split('+')[0] ?? "0";

    /// <summary>Most planes an output volume may have (<see cref="Volume.MaxPlanes"/>).</summary>
    public const int MaxPlanes = Volume.MaxPlanes;

    /// <summary>
    /// Builds the series at <see cref="BuildOptions.Input"/> from its files. With a <paramref name="clock"/>, each stage's
    /// cost is recorded on it (opening the series is the stage "series"); with a <paramref name="pairCache"/>, pairs
    /// registered by earlier runs are taken from it (<see cref="RegisterStage.Register"/>). The outputs are the same either way.
    /// </summary>
    public static BuildResult Run(BuildOptions options, IProgress<string>? progress = null, StageClock? clock = null, IPairCache? pairCache = null) =>
        Run(options, StageClock.Time(clock, "series", () => SeriesReader.Open(options.Input, options.Series)), SectionFiles.Instance, progress, clock, pairCache);

    /// <summary>
    /// Builds an opened series whose pixels come from <paramref name="images"/> (files, or images in memory). The
    /// template, when the options name one, is read here; the record's <c>created</c> is the one field that depends on
    /// when the build ran. Every stage is timed on <paramref name="clock"/> when one is given, also those that have
    /// nothing to do in this build (no template, not aligned), so the list of stages is always the same.
    /// </summary>
    public static BuildResult Run(BuildOptions options, SectionSeries series, ISectionImages images, IProgress<string>? progress = null,
        StageClock? clock = null, IPairCache? pairCache = null)
    {
        var plan = StageClock.Time(clock, "plan", () =>
        {
            PlanStage.Check(options, series);
            var template = options.Template is { } t ? TemplateVolume.Load(t.Path, t.CutAxis) : null;
            return PlanStage.Plan(options, series, template);
        });
        using var sections = StageClock.Time(clock, "prepare", () => PrepareStage.Prepare(plan, images, progress));
        bool align = options.Align && sections.Count > 1;
        var slices = StageClock.Time(clock, "template slice", () => align ? TemplateStage.Slice(plan, sections, progress) : null); // null without a template
        var pairs = StageClock.Time(clock, "register", () => align ? RegisterStage.Register(plan, sections, slices, progress, pairCache) : null);
        // The solve may register pairs beyond the first three neighbours (PairSet.Pair): their time counts here.
        var solved = StageClock.Time(clock, "solve", () => SolveStage.Solve(plan, sections, pairs));
        var placements = StageClock.Time(clock, "template place",
            () => TemplateStage.PlaceOnTemplate(plan, sections, solved, slices, pairs?.SideMatches, progress));
        var framed = StageClock.Time(clock, "frame", () => FrameStage.Orient(plan, sections, placements, progress));
        var grid = StageClock.Time(clock, "grid", () => OutputGrid.Cut(GridRequestFor(plan, sections, framed)));
        var rendered = StageClock.Time(clock, "render", () => RenderStage.Render(plan, sections, framed, grid, images, progress));
        var record = StageClock.Time(clock, "record", () => RecordStage.Record(plan, sections, framed, grid, rendered, DateTime.UtcNow));
        return new BuildResult(rendered.Volume, record, plan.InputBitDepth);
    }

    /// <summary>The placed sections, sizes and frame options the output grid is cut from.</summary>
    private static GridRequest GridRequestFor(SeriesPlan plan, PreparedSections sections, FramedPlacements framed)
    {
        var p = framed.Placements;
        var placed = Enumerable.Range(0, sections.Count).Where(n => p.Chain[n].Route != Solve.LinkRoute.Failed).Select(n =>
        {
            var w = sections[n];
            var tissue = w.Prepared is { } prepared
                ? new SectionTissue(prepared.TissueMask, prepared.WorkWidth, prepared.WorkHeight, prepared.FullToWork.Inverse())
                : null;
            return new GridSection(w.FullToWork, p.Chain[n].ToReference, w.Entry.Image!.Width, w.Entry.Image!.Height, tissue);
        }).ToList();
        var lattice = p.OnTemplate is { } t
            ? new TemplateLattice(plan.Template!, t.PlaneToWork, t.FirstPlane, t.Direction, plan.TemplateGrid)
            : null;
        return new GridRequest(placed, sections.WorkPixelUm, plan.OutputPixelUm, plan.Options.Frame, plan.Options.Axes, plan.Series, lattice, p.Aligned,
            plan.Options.Input);
    }
}
