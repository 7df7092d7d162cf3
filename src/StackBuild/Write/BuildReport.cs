using System.Globalization;
using System.Net;
using System.Text;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Pipeline;
using StackBuild.Solve;
using StackBuild.Reslice;
using StackBuild.Series;
using StackBuild.Numerics;

namespace StackBuild.Write;

/// <summary>Why a section is flagged for a look in the report.</summary>
public static class SectionFlags
{
    /// <summary>Sections whose pair confidence is below this are flagged.</summary>
    public const double LowConfidence = 0.5;

    /// <summary>A section whose side margin (<see cref="SectionRecord.SideMargin"/>) is below this is flagged.</summary>
    public const double UncertainSideMargin = Solve.MirrorParity.UncertainMargin;

    /// <summary>A section whose estimated placement error is above this many output voxels is flagged.</summary>
    public const double EstimatedErrorVoxels = 2;

    /// <summary>The output's in-plane voxel size in µm, for <see cref="Reasons"/>; null when the record has none.</summary>
    public static double? VoxelUm(BuildRecord record) => record.VoxelSizeMm.Length > 0 ? record.VoxelSizeMm[0] * 1000 : null;

    /// <summary>
    /// Route disagreement (µm) above which a section is flagged: three times the build's median disagreement,
    /// and at least 2.5 registration pixels, so ordinary sub-pixel scatter is not flagged.
    /// </summary>
    public static double DisagreementLimitUm(BuildRecord record)
    {
        var values = record.Sections.Where(s => s.RouteDisagreementUm is not null).Select(s => s.RouteDisagreementUm!.Value).OrderBy(v => v).ToArray();
        double median = values.Length == 0 ? 0 : values[values.Length / 2];
        return Math.Max(3 * median, 2.5 * Evaluate.Uncertainty.RegistrationPixelUm(record));
    }

    /// <summary>The record with every section's <see cref="SectionRecord.Flags"/> filled in (<see cref="For"/>).</summary>
    public static BuildRecord Annotate(BuildRecord record)
    {
        var flags = For(record);
        return record with { Sections = record.Sections.Select(s => s with { Flags = [.. flags[s.Number]] }).ToList() };
    }

    /// <summary>
    /// True when every reason is the estimated error above <see cref="EstimatedErrorVoxels"/> voxels: in a build without a
    /// template, the chain's slow drift. The CLI and the report list such sections in one line, after the sections that have
    /// a trouble of their own.
    /// </summary>
    public static bool EstimateOnly(IReadOnlyList<string> reasons) =>
        reasons.Count > 0 && reasons.All(x => x.StartsWith(EstimateReason, StringComparison.Ordinal));

    /// <summary>How the reason for a large estimated error begins (<see cref="Reasons"/>, <see cref="EstimateOnly"/>).</summary>
    private const string EstimateReason = "estimated placement error";

    /// <summary>A template match weaker than this share of its neighbours' median similarity is flagged.</summary>
    public const double WeakTemplateShare = 0.5;

    /// <summary>Every section's reasons (<see cref="Reasons"/>, and a template match much weaker than its neighbours'), by number.</summary>
    public static IReadOnlyDictionary<int, IReadOnlyList<string>> For(BuildRecord record)
    {
        double limit = DisagreementLimitUm(record);
        double? voxel = VoxelUm(record);
        var matched = record.Sections.Where(s => s.Template is { Matched: true, Similarity: not null }).ToList();
        var result = new Dictionary<int, IReadOnlyList<string>>();
        foreach (var s in record.Sections)
        {
            var reasons = Reasons(s, limit, voxel).ToList();
            if (s.Status == SectionOutcome.Aligned && s.Template is { Matched: true, Similarity: double own, PlacedByTemplate: false })
            {
                var near = matched.Where(o => o.Number != s.Number && Math.Abs(o.ZIndex - s.ZIndex) <= Evaluate.Uncertainty.TemplateHalfWindow)
                    .Select(o => o.Template!.Similarity!.Value).OrderBy(v => v).ToList();
                if (near.Count >= 3 && own < WeakTemplateShare * near[near.Count / 2])
                    reasons.Add(string.Create(CultureInfo.InvariantCulture,
                        $"its template match is weak (similarity {own:0.000} against its neighbours' {near[near.Count / 2]:0.000}): the template could hardly check its place"));
            }
            result[s.Number] = reasons;
        }
        return result;
    }

    /// <summary>The reasons (plain sentences) to look at a section; empty when there is none.</summary>
    public static IReadOnlyList<string> Reasons(SectionRecord s, double disagreementLimitUm, double? voxelUm = null)
    {
        var reasons = new List<string>();
        if (s.Status == SectionOutcome.Failed)
            reasons.Add(s.Template?.PartUnplaced == true
                ? "left out of the volume: its part of the stack is linked to the rest by no confident neighbour match, and the template could not place it"
                : "no confident match with a neighbour: left out of the volume");
        if (s.Confidence is double c && c < LowConfidence)
        {
            reasons.Add(string.Create(CultureInfo.InvariantCulture, $"low registration confidence ({c:0.00})"));
            if (s.RunnerUp is { FlipsSide: true } ru && s.Ncc is double ncc && s.Status != SectionOutcome.Failed)
                reasons.Add(string.Create(CultureInfo.InvariantCulture,
                    $"which side is up is uncertain: the section turned over matched nearly as well (NCC {ru.Ncc:0.00} against {ncc:0.00}); check it against its neighbours"));
        }
        if (s.SideMargin is double m && m < UncertainSideMargin && s.Status is SectionOutcome.Aligned && !reasons.Any(r => r.StartsWith("which side is up", StringComparison.Ordinal)))
            reasons.Add(string.Create(CultureInfo.InvariantCulture,
                $"which side is up is uncertain: turned over, it would match its neighbours almost as well (side margin {m:0.000}); check it against its neighbours"));
        if (s.RouteDisagreementUm is double d && d > disagreementLimitUm)
            reasons.Add(string.Create(CultureInfo.InvariantCulture, $"placements through the first and second neighbour differ by {d:0} µm"));
        if (s.Part is int part && s.Status == SectionOutcome.Aligned && s.Template is null)
            reasons.Add(s.PartJoinedBy is { } join
                ? string.Create(CultureInfo.InvariantCulture,
                    $"in part {part} of the stack, which no trusted match links to the largest part: the parts were placed relative to each other by their best match across the break alone (section {join.Section} onto {join.Onto}, confidence {join.Confidence:0.00}), so where this part lies relative to the rest is uncertain — check that boundary, or a template would place it")
                : s.Route == LinkRoute.PartReference
                ? $"nothing matched across the sections before or after this stretch, so it was chained to this section as a part of its own (part {part}): where the part lies relative to the rest is unknown — a template would place it"
                : $"in part {part} of the stack, which nothing linked to the rest: where the part lies relative to the rest is unknown — a template would place it");
        if (voxelUm is double v && s.EstimatedErrorUm is double estimate && estimate > EstimatedErrorVoxels * v && s.Status == SectionOutcome.Aligned)
            reasons.Add(string.Create(CultureInfo.InvariantCulture, $"{EstimateReason} {estimate:0} µm, more than {EstimatedErrorVoxels} voxels")
                + (s.Template is null ? " (without a template the chain's course is unchecked: its links' errors add up to a slow drift of the stack; a template would measure and remove it)" : ""));
        if (s.Damaged) reasons.Add("marked damaged in the manifest" + (string.IsNullOrEmpty(s.Note) ? "" : $" ({s.Note})"));
        if (s.Template?.Outlier is { } why) reasons.Add($"its template match was set aside ({why})");
        if (s.Template is { PlacedByTemplate: true } t) reasons.Add(t.Note ?? "placed by its own template match");
        if (s.Template is { CarriedWith: int with })
            reasons.Add($"placed with section {with}, which its own template match placed, through the registrations between them: check it against section {with}");
        if (s.Template is { ChainStep: true }) reasons.Add("the template sees a step in the chain here: the link to the section before is likely wrong (the stack was corrected on either side separately)");
        // The template moved the section against its registration to the section before by more than the flag's limit: the
        // link or the template's course there is off by at least half of that (a noisy template followed section by section).
        else if (voxelUm is double vu && s.Template is { PlacedByTemplate: false, LinkChangeUm: double change } && change > EstimatedErrorVoxels * vu && s.Status == SectionOutcome.Aligned)
            reasons.Add(string.Create(CultureInfo.InvariantCulture,
                $"the template moved it {change:0} µm against its registration to the section before (more than {EstimatedErrorVoxels} voxels): the link or the template's course is off here; check the two sections"));
        return reasons;
    }
}

/// <summary>
/// The build's quality report: one self-contained HTML page (styles inline, images as data: URIs, no scripts
/// or fonts fetched) written beside the volume and the sidecar. It uses only the build itself, never ground truth.
/// </summary>
public static class BuildReport
{
    /// <summary>Largest side of a plane image in the report, in pixels.</summary>
    public const int PlaneSide = 420;
    public const int ThumbnailSide = 200;
    /// <summary>Shown size (CSS pixels) of the section plane's long side; the other planes share its scale.</summary>
    public const int PlaneDisplay = 380;

    private static readonly CultureInfo Inv = CultureInfo.InvariantCulture;

    /// <summary>
    /// Writes the report atomically (the whole page is produced into a temporary file first; a failure leaves no
    /// partial report). <paramref name="result"/>'s record should carry the uncertainty estimates
    /// (<see cref="Evaluate.Uncertainty.Annotate"/>).
    /// </summary>
    public static void Write(string path, BuildResult result, string volumeName) =>
        AtomicFile.Write(path, stream =>
        {
            using var writer = new StreamWriter(stream, new UTF8Encoding(false), 1 << 16, leaveOpen: true);
            Render(writer, result, volumeName);
        });

    public static void Render(TextWriter o, BuildResult result, string volumeName)
    {
        var r = result.Record;
        var volume = result.Volume;
        var all = SectionFlags.For(r);
        var flagged = r.Sections.Select(s => (Section: s, Reasons: all[s.Number])).Where(t => t.Reasons.Count > 0).ToList();
        var placed = r.Sections.Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed).ToList();
        double minConfidence = r.Parameters.MinConfidence;

        o.Write($"""
            <!DOCTYPE html>
            <html lang="en"><head><meta charset="utf-8">
            <meta name="viewport" content="width=device-width, initial-scale=1">
            <title>Build report: {E(volumeName)}</title>
            <style>{Css}</style>
            </head><body>
            <header><h1>Build report <span class="file">{E(volumeName)}</span></h1>
            <p class="sub">StackBuild {E(r.Version)} · built {E(r.Created)} · input {E(r.Input)}{(r.VolumeSha256 is { } sha256 ? $" · volume SHA-256 <code>{E(sha256)}</code>" : "")}</p></header>
            <p class="caution"><strong>For research use only.</strong> This volume was rebuilt automatically from
            serial sections. Check the flagged sections and the planes below before drawing conclusions; the error
            estimates are heuristic and not calibrated intervals.</p>
            """);

        // Summary: counts, grid, parameters.
        int Count(SectionOutcome status) => r.Sections.Count(s => s.Status == status);
        o.Write("<section><h2>Summary</h2><div class=\"cards\">");
        Card(o, "found", r.Sections.Count(s => s.File is not null), "sections with an image");
        Card(o, "aligned", Count(SectionOutcome.Aligned) + Count(SectionOutcome.Placed), r.Aligned ? "placed in the volume" : "placed, not aligned");
        Card(o, "mirrored", placed.Count(s => s.Mirrored == true), "turned face up");
        int gapsFilled = r.Sections.Count(s => s.Status == SectionOutcome.Gap && s.Filled is not null);
        Card(o, "gaps", Count(SectionOutcome.Gap), gapsFilled == 0 ? "lost sections (empty planes)"
            : gapsFilled == Count(SectionOutcome.Gap) ? "lost sections (planes filled)" : $"lost sections ({gapsFilled} planes filled)");
        Card(o, "excluded", Count(SectionOutcome.Excluded), "left out by the manifest");
        Card(o, "failed", Count(SectionOutcome.Failed), "no confident match");
        Card(o, "flagged", flagged.Count, "worth a look", flagged.Count > 0 ? "warn" : "");
        o.Write("</div><div class=\"columns\"><table class=\"facts\" id=\"volume\"><caption>Volume</caption>");
        Fact(o, "grid", $"{r.Dimensions[0]} × {r.Dimensions[1]} × {r.Dimensions[2]} voxels");
        Fact(o, "voxel size", $"{Um(r.VoxelSizeMm[0])} × {Um(r.VoxelSizeMm[1])} × {Um(r.VoxelSizeMm[2])} µm", "voxel-size");
        Fact(o, "axis codes", $"{r.AxisCodes} (image right, image down, increasing section number)", "axis-codes");
        Fact(o, "input pixel size", $"{F(r.InputPixelSizeUm, "0.###")} µm");
        Fact(o, "section spacing", $"{F(r.SpacingUm, "0.###")} µm");
        if (r.Frame?.Template is null) Fact(o, "reference section", r.ReferenceSection.ToString(Inv));
        else Fact(o, "chain reference section", $"{r.ReferenceSection.ToString(Inv)} (the frame is the template's)");
        if (r.Frame is { } frame) Fact(o, "output frame", frame.Describe());
        var errors = placed.Where(s => s.EstimatedErrorUm is not null).Select(s => s.EstimatedErrorUm!.Value).ToList();
        if (errors.Count > 0) Fact(o, "estimated error", $"median {F(Quantiles.Median(errors), "0.#")} µm, largest {F(errors.Max(), "0.#")} µm");
        o.Write("</table><table class=\"facts\" id=\"parameters\"><caption>Run parameters</caption>");
        Fact(o, "version", $"StackBuild {r.Version}");
        foreach (var (key, value) in r.Parameters.Entries()) Fact(o, ParameterName(key), value);
        o.Write("</table></div>");
        if (r.Warnings.Count > 0)
        {
            o.Write("<div class=\"warnings\"><h3>Warnings</h3><ul>");
            foreach (var w in r.Warnings) o.Write($"<li>{E(w)}</li>");
            o.Write("</ul></div>");
        }
        o.Write("</section>");

        // Plots along the stack.
        o.Write("<section><h2>Along the stack</h2><div class=\"plots\">");
        Img(o, ReportPlots.Confidence(r, minConfidence, SectionFlags.LowConfidence), "Registration confidence per section", "plot-confidence");
        Img(o, ReportPlots.EstimatedError(r), "Estimated placement error per section", "plot-error");
        Img(o, ReportPlots.Similarity(r), "Similarity (NCC) to the neighbour per section", "plot-ncc");
        Img(o, ReportPlots.Rotation(r), "Turn of each section relative to the neighbour it was registered to", "plot-rotation");
        Img(o, ReportPlots.Translation(r), "Residual per section: its placement against the registrations that did not place it", "plot-translation");
        o.Write("</div></section>");

        // Planes through the volume.
        var window = IntensityWindow.Robust(volume);
        string a = r.AxisCodes;
        o.Write("<section><h2>Planes through the centre of the volume</h2><div class=\"planes\">");
        // All four at one display scale (the section plane's long side shown at PlaneDisplay pixels), so distances compare.
        // The section plane: the placed section nearest the middle (the middle plane itself may be a gap).
        var middle = placed.OrderBy(s => Math.Abs(s.ZIndex - volume.Nz / 2)).ThenBy(s => s.ZIndex).FirstOrDefault();
        int k = middle?.ZIndex ?? volume.Nz / 2;
        var section = ReportImages.Plane(volume, new PlaneSpec(PlaneOrientation.Section, OffsetMm: (k - volume.Nz / 2) * volume.Affine.VoxelSizes.K), PlaneSide);
        double display = PlaneDisplay / (double)Math.Max(section.Width, section.Height);
        PlaneFigure(o, section, window, display,
            $"Section plane k = {k}{(middle is null ? "" : $", section {middle.Number}")} (right → {ReportImages.Letter(a, 0)}, down → {ReportImages.Letter(a, 1)})", "plane-section");
        PlaneFigure(o, ReportImages.Plane(volume, new PlaneSpec(Orientation("ik")), PlaneSide), window, display,
            $"Across the sections: i–k plane at j = {volume.Ny / 2} (right → {ReportImages.Letter(a, 0)}, down → {ReportImages.Letter(a, 2)})", "plane-ik");
        PlaneFigure(o, ReportImages.Plane(volume, new PlaneSpec(Orientation("jk")), PlaneSide), window, display,
            $"Across the sections: j–k plane at i = {volume.Nx / 2} (right → {ReportImages.Letter(a, 1)}, down → {ReportImages.Letter(a, 2)})", "plane-jk");
        var (tiltH, tiltV) = ObliqueTilts(volume);
        PlaneFigure(o, ReportImages.Plane(volume, new PlaneSpec(PlaneOrientation.Section, tiltH, tiltV), PlaneSide), window, display,
            string.Create(Inv, $"Oblique: the section plane tilted {tiltH:0}° about its horizontal and {tiltV:0}° about its vertical axis, through the centre"), "plane-oblique");
        o.Write("</div><p class=\"note\">Across-section planes are shown at true scale (section spacing against pixel size); jagged edges there mean sections disagree.</p></section>");

        // Flagged sections.
        o.Write($"<section id=\"flagged\"><h2>Flagged sections ({flagged.Count})</h2>");
        if (flagged.Count == 0) o.Write("<p>No section was flagged.</p>");
        else
        {
            o.Write("<p class=\"note\">Each row: the section as placed in the volume, the neighbour it was compared with, and both overlaid " +
                "(section in magenta, neighbour in green, each scaled by its own brightness range first; grey where they agree).</p>");
            var byNumber = placed.ToDictionary(s => s.Number);
            foreach (var (s, reasons) in flagged.Where(f => !SectionFlags.EstimateOnly(f.Reasons)))
                FlaggedSection(o, volume, window, r, s, reasons, byNumber);
            var estimateOnly = flagged.Where(f => SectionFlags.EstimateOnly(f.Reasons)).Select(f => f.Section.Number).ToList();
            if (estimateOnly.Count > 0)
                o.Write($"<p class=\"estimate-only\">Flagged only for an estimated placement error above {SectionFlags.EstimatedErrorVoxels} voxels " +
                    (r.Sections.Any(x => x.Template is not null) ? "" : "(without a template the chain's course is unchecked and drifts slowly; a template would measure and remove it)") +
                    $": {(estimateOnly.Count == 1 ? "section" : "sections")} {SectionNumbers.Runs(estimateOnly)}. Their estimates are in the table below.</p>");
        }
        o.Write("</section>");

        SectionTable(o, r, flagged.Select(f => f.Section.Number).ToHashSet());
        o.Write("<footer>Written by StackBuild beside the volume and its sidecar (.json); the sidecar holds every number shown here.</footer></body></html>\n");
    }

    private static PlaneOrientation Orientation(string name) =>
        PlaneOrientation.TryParse(name, out var orientation, out var problem) ? orientation : throw new InvalidOperationException(problem);

    private static void PlaneFigure(TextWriter o, GrayImage image, IntensityWindow window, double display, string caption, string id)
    {
        int w = Math.Max(1, (int)Math.Round(image.Width * display)), h = Math.Max(1, (int)Math.Round(image.Height * display));
        o.Write($"<figure id=\"{id}\"><img src=\"{DataUri(ReportImages.Gray(image, window))}\" alt=\"{E(caption)}\" width=\"{w}\" height=\"{h}\">" +
            $"<figcaption style=\"max-width:{Math.Max(w, 240)}px\">{E(caption)}</figcaption></figure>");
    }

    /// <summary>
    /// Tilts (degrees) that keep the oblique plane's central part inside the stack: a tilt whose depth change across
    /// 80 % of the plane's height (width) equals the stack's depth, at most 30°.
    /// </summary>
    private static (double About, double Vertical) ObliqueTilts(Volume volume)
    {
        var (si, sj, sk) = volume.Affine.VoxelSizes;
        double depth = volume.Nz * sk, width = volume.Nx * si, height = volume.Ny * sj;
        double Tilt(double across) => Math.Round(Math.Min(30, Math.Atan2(depth, 0.8 * across) * 180 / Math.PI * 0.8));
        return (Tilt(height), Tilt(width) / 2);
    }

    private static void FlaggedSection(TextWriter o, Volume volume, IntensityWindow window, BuildRecord r, SectionRecord s, IReadOnlyList<string> reasons,
        Dictionary<int, SectionRecord> placed)
    {
        // The neighbour: the section registered to, else the nearest placed section before (or after) it.
        var neighbour = s.RegisteredTo is int t && placed.TryGetValue(t, out var n) ? n
            : placed.Values.Where(p => p.Number < s.Number).MaxBy(p => p.Number) ?? placed.Values.Where(p => p.Number > s.Number).MinBy(p => p.Number);
        o.Write($"<div class=\"flag\" id=\"flag-{s.Number}\"><div class=\"flag-text\"><h3>Section {s.Number}</h3><ul>");
        foreach (var reason in reasons) o.Write($"<li>{E(reason)}</li>");
        o.Write("</ul>");
        if (s.File is not null) o.Write($"<p class=\"file\">{E(s.File)}</p>");
        o.Write("</div>");
        var own = ReportImages.SectionPlane(volume, s.ZIndex, ThumbnailSide);
        Thumb(o, ReportImages.Gray(own, window), $"section {s.Number}" + (s.Status == SectionOutcome.Failed ? " (not placed: empty)" : ""));
        if (neighbour is not null && neighbour.Number != s.Number)
        {
            var other = ReportImages.SectionPlane(volume, neighbour.ZIndex, ThumbnailSide);
            Thumb(o, ReportImages.Gray(other, window), $"neighbour {neighbour.Number}");
            if (s.Status != SectionOutcome.Failed) Thumb(o, ReportImages.Overlay(own, other), "overlay");
        }
        o.Write("</div>");
    }

    private static void SectionTable(TextWriter o, BuildRecord r, HashSet<int> flagged)
    {
        double um = r.VoxelSizeMm.Length > 0 ? r.VoxelSizeMm[0] * 1000 : 1;
        o.Write("""
            <section><h2>Every section</h2>
            <table class="sections" id="sections"><thead><tr>
            <th>section</th><th>file</th><th>status</th><th>mirrored</th><th>rotation (°)</th><th>translation x, y (µm)</th>
            <th>confidence</th><th>est. error (µm)</th><th>NCC</th><th>registered to</th>
            """);
        bool template = r.Sections.Any(s => s.Template is not null);
        if (template) o.Write("<th>template match</th>");
        o.Write("</tr></thead><tbody>");
        foreach (var s in r.Sections)
        {
            string css = flagged.Contains(s.Number) ? " class=\"flagged\"" : s.Status is SectionOutcome.Gap or SectionOutcome.Excluded ? " class=\"absent\"" : "";
            string shift = s.ShiftPx is { Length: 2 } p ? $"{F(p[0] * um, "0.0")}, {F(p[1] * um, "0.0")}" : "";
            o.Write($"<tr id=\"section-{s.Number}\"{css}><td class=\"number\">{s.Number}</td><td class=\"file\">{E(s.File ?? "")}</td>" +
                $"<td class=\"status\">{E(s.Filled is null ? s.Status.Word() : $"{s.Status.Word()}, filled ({s.Filled})")}</td><td class=\"mirrored\">{(s.Mirrored is bool mb ? (mb ? "yes" : "no") : "")}</td>" +
                $"<td class=\"rotation\">{F(s.RotationDegrees, "0.00")}</td><td class=\"shift\">{shift}</td>" +
                $"<td class=\"confidence\">{F(s.Confidence, "0.000")}</td><td class=\"error\">{F(s.EstimatedErrorUm, "0.0")}</td>" +
                $"<td class=\"ncc\">{F(s.Ncc, "0.000")}</td><td class=\"route\">{Route(s)}</td>" +
                (template ? $"<td class=\"template\">{E(TemplateMatch(s.Template))}</td>" : "") + "</tr>");
        }
        o.Write("</tbody></table><p class=\"note\">Translation: where the image's top-left pixel centre lands in the output plane. " +
            "Estimated error: one standard error, from peak sharpness, route disagreement and confidence accumulated along the " +
            "chain, and without a template the chain's slow drift as one global fit would see it (see docs/uncertainty.md)" +
            (template ? "; with a template, relative to the template, from how well the template matches nearby agree with the placements. " +
                "Template match: similarity (normalised mutual information − 1) and how far the section's own match lies from its placement" : "") +
            ".</p></section>");
    }

    private static string TemplateMatch(SectionTemplateRecord? t) => t switch
    {
        null => "",
        { Outlier: { } why } => $"set aside: {why}",
        { Matched: true } => $"similarity {F(t.Similarity, "0.00")}, {F(t.MisfitUm, "0.0")} µm off",
        _ => t.Note ?? "not matched",
    };

    /// <summary>A sidecar key as a label: words apart, a trailing unit in brackets (output_pixel_size_um → output pixel size (µm)).</summary>
    private static string ParameterName(string key)
    {
        var words = key.Split('_').ToList();
        string unit = words.Count > 1 ? words[^1] switch { "um" => " (µm)", "px" => " (pixels)", "deg" => " (°)", _ => "" } : "";
        if (unit.Length > 0) words.RemoveAt(words.Count - 1);
        return string.Join(' ', words) + unit;
    }

    private static string Route(SectionRecord s) => s.Route switch
    {
        null => "",
        LinkRoute.Reference => "reference",
        LinkRoute route when s.RegisteredTo is int t => E($"{t} ({route.Word()})"),
        LinkRoute route => E(route.Word()),
    };

    private static void Card(TextWriter o, string name, int value, string hint, string css = "") =>
        o.Write($"<div class=\"card {css}\" id=\"count-{name}\"><span class=\"value\">{value}</span><span class=\"name\">{E(name)}</span><span class=\"hint\">{E(hint)}</span></div>");

    private static void Fact(TextWriter o, string name, string value, string? id = null) =>
        o.Write($"<tr{(id is null ? "" : $" id=\"{id}\"")}><th>{E(name)}</th><td>{E(value)}</td></tr>");

    private static void Img(TextWriter o, byte[] png, string alt, string id) =>
        o.Write($"<img id=\"{id}\" class=\"plot\" src=\"{DataUri(png)}\" alt=\"{E(alt)}\" width=\"{ReportPlots.Width}\" height=\"{ReportPlots.Height}\">");

    private static void Thumb(TextWriter o, byte[] png, string caption) =>
        o.Write($"<figure class=\"thumb\"><img src=\"{DataUri(png)}\" alt=\"{E(caption)}\"><figcaption>{E(caption)}</figcaption></figure>");

    private static string DataUri(byte[] png) => "data:image/png;base64," + Convert.ToBase64String(png);

    private static string E(string text) => WebUtility.HtmlEncode(text);

    private static string F(double? value, string format) => value is double v ? v.ToString(format, Inv) : "";

    private static string Um(double mm) => (mm * 1000).ToString("0.###", Inv);

    private const string Css = """
        body{font-family:system-ui,"DejaVu Sans",sans-serif;color:#1a202c;margin:0 auto;max-width:1600px;padding:16px 28px;background:#fff;line-height:1.4}
        header h1{font-size:22px;margin:0}header .file{font-weight:normal;color:#4a5568;font-family:"DejaVu Sans Mono",monospace;font-size:18px;margin-left:8px}
        .sub{color:#718096;margin:2px 0 10px;font-size:13px}
        .caution{background:#fffaf0;border-left:4px solid #dd6b20;padding:8px 12px;font-size:14px;margin:8px 0 16px}
        h2{font-size:18px;border-bottom:1px solid #e2e8f0;padding-bottom:4px;margin:24px 0 10px}
        h3{font-size:15px;margin:0 0 4px}
        .cards{display:flex;flex-wrap:wrap;gap:10px;margin-bottom:14px}
        .card{border:1px solid #e2e8f0;border-radius:6px;padding:8px 14px;min-width:110px;display:flex;flex-direction:column}
        .card .value{font-size:26px;font-weight:600}.card .name{font-size:13px;text-transform:uppercase;letter-spacing:.04em;color:#4a5568}
        .card .hint{font-size:12px;color:#a0aec0}.card.warn{border-color:#dd6b20;background:#fffaf0}
        .columns{display:flex;flex-wrap:wrap;gap:28px;align-items:flex-start}
        table.facts{border-collapse:collapse;font-size:13px}table.facts caption{text-align:left;font-weight:600;padding-bottom:4px}
        table.facts th{text-align:left;color:#4a5568;font-weight:normal;padding:2px 14px 2px 0;vertical-align:top}table.facts td{padding:2px 0}
        .warnings{margin-top:12px;font-size:13px;color:#9c4221}.warnings ul{margin:4px 0;padding-left:20px}
        .plots{display:grid;grid-template-columns:repeat(auto-fill,minmax(600px,1fr));gap:10px}
        .plots img{width:100%;height:auto;border:1px solid #edf2f7}
        .planes{display:flex;flex-wrap:wrap;gap:14px;align-items:flex-start}
        figure{margin:0}figure img{display:block}
        figcaption{font-size:12px;color:#4a5568;margin-top:3px}
        .thumb figcaption{max-width:200px}
        .note{font-size:12px;color:#718096}
        .flag{display:flex;gap:12px;align-items:flex-start;border-top:1px solid #edf2f7;padding:10px 0}
        .flag-text{width:300px;font-size:13px}.flag-text ul{margin:0;padding-left:18px}.flag-text .file{color:#718096;font-family:"DejaVu Sans Mono",monospace;font-size:12px}
        .thumb img{width:200px}
        table.sections{border-collapse:collapse;font-size:12.5px;width:100%}
        table.sections th{background:#f7fafc;text-align:left;padding:4px 8px;border-bottom:2px solid #e2e8f0;position:sticky;top:0}
        table.sections td{padding:2px 8px;border-bottom:1px solid #edf2f7;font-variant-numeric:tabular-nums}
        table.sections td.rotation,table.sections td.shift,table.sections td.confidence,table.sections td.error,table.sections td.ncc{text-align:right}
        tr.flagged td{background:#fffaf0}tr.flagged td.number{border-left:3px solid #dd6b20}tr.absent td{color:#a0aec0}
        footer{margin:24px 0 8px;font-size:12px;color:#a0aec0}
        """;
}
