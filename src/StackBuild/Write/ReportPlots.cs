using ScottPlot;
using StackBuild.Pipeline;

namespace StackBuild.Write;

/// <summary>The report's charts along the stack, drawn headless as PNG with ScottPlot.</summary>
internal static class ReportPlots
{
    public const int Width = 760, Height = 250;

    private static readonly Color Before = Color.FromHex("#a0aec0");
    private static readonly Color Blue = Color.FromHex("#2b6cb0"), Orange = Color.FromHex("#dd6b20"),
        Red = Color.FromHex("#c53030"), Grey = Color.FromHex("#718096");

    private static IEnumerable<SectionRecord> Placed(BuildRecord r) => r.Sections.Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed);

    /// <summary>Pair confidence per section, with the build's minimum and the report's flag limit.</summary>
    public static byte[] Confidence(BuildRecord record, double minConfidence, double flagBelow)
    {
        var plot = NewPlot("Registration confidence", "confidence (0–1)");
        var points = record.Sections.Where(s => s.Confidence is not null).ToList();
        AddSeries(plot, points, s => s.Confidence!.Value, Blue, "confidence");
        Limit(plot, flagBelow, Orange, $"flag below {flagBelow:0.##}");
        Limit(plot, minConfidence, Red, $"not trusted below {minConfidence:0.##}");
        plot.Axes.SetLimitsY(-0.03, 1.05);
        return Finish(plot, record);
    }

    /// <summary>
    /// What the alignment did between each section and the neighbour it was registered to: the difference of the turns
    /// applied to the two (degrees, wrapped to ±180). How each slide lay on the scanner cancels out of nothing else, so
    /// the turns themselves are left to the table; here a steady line near one value is the scans' own habit and a
    /// jump is a link to look at. Pairs mounted on different sides are marked apart (their difference is not a turn).
    /// </summary>
    public static byte[] Rotation(BuildRecord record)
    {
        var plot = NewPlot("Turn relative to the neighbour registered to", "section − neighbour (°)");
        var turns = RelativeTurns(record);
        AddPoints(plot, turns.Where(t => t.SameSide).Select(t => (t.Number, t.Degrees)).ToList(), Blue, "same side up");
        AddPoints(plot, turns.Where(t => !t.SameSide).Select(t => (t.Number, t.Degrees)).ToList(), Orange, "sides differ", lines: false);
        return Finish(plot, record);
    }

    /// <summary>One section's turn relative to the neighbour it was registered to.</summary>
    internal readonly record struct RelativeTurn(int Number, int Neighbour, double Degrees, bool SameSide);

    /// <summary>
    /// For every placed section registered to a placed neighbour: rotation_deg of the section minus that of the
    /// neighbour, wrapped to (−180, 180].
    /// </summary>
    internal static IReadOnlyList<RelativeTurn> RelativeTurns(BuildRecord record)
    {
        var placed = Placed(record).Where(s => s.RotationDegrees is not null).ToDictionary(s => s.Number);
        var turns = new List<RelativeTurn>();
        foreach (var s in placed.Values.OrderBy(s => s.Number))
        {
            if (s.RegisteredTo is not int n || n == s.Number || !placed.TryGetValue(n, out var neighbour)) continue;
            double d = s.RotationDegrees!.Value - neighbour.RotationDegrees!.Value;
            d -= 360 * Math.Ceiling((d - 180) / 360);
            turns.Add(new RelativeTurn(s.Number, n, d, (s.Mirrored == true) == (neighbour.Mirrored == true)));
        }
        return turns;
    }

    /// <summary>
    /// Residuals: how far each section's placement disagrees with the registrations that did not place it (µm): the
    /// route through the second neighbour, the pairs the smoothing prior weighed (root mean square of those used), and
    /// the section's own template match. Where the placement is right all of these stay small.
    /// </summary>
    public static byte[] Translation(BuildRecord record)
    {
        var plot = NewPlot("Residual: placement against the other registrations", "disagreement (µm)");
        var sections = record.Sections.OrderBy(s => s.Number).ToList();
        AddPoints(plot, sections.Where(s => s.RouteDisagreementUm is not null).Select(s => (s.Number, s.RouteDisagreementUm!.Value)).ToList(),
            Blue, "first vs second neighbour route");
        AddPoints(plot, sections.Select(s => (s.Number, Rms: PairResidualRms(s))).Where(p => p.Rms is not null).Select(p => (p.Number, p.Rms!.Value)).ToList(),
            Orange, "pairs in the smoothing solve (rms)");
        AddPoints(plot, sections.Where(s => s.Template?.MisfitUm is not null).Select(s => (s.Number, s.Template!.MisfitUm!.Value)).ToList(),
            Grey, "own template match");
        double top = new[] { 1.0 }.Concat(sections.Select(s => Math.Max(s.RouteDisagreementUm ?? 0, Math.Max(PairResidualRms(s) ?? 0, s.Template?.MisfitUm ?? 0)))).Max();
        plot.Axes.SetLimitsY(0, top * 1.08);
        return Finish(plot, record);
    }

    private static double? PairResidualRms(SectionRecord s)
    {
        var used = s.Pairs?.Where(p => p.Weight > 0).ToList();
        return used is { Count: > 0 } ? Math.Sqrt(used.Average(p => p.ResidualUm * p.ResidualUm)) : null;
    }

    /// <summary>Normalised cross-correlation with the section registered to.</summary>
    public static byte[] Similarity(BuildRecord record)
    {
        var plot = NewPlot("Similarity to the neighbour registered to", "NCC");
        AddSeries(plot, record.Sections.Where(s => s.Ncc is not null).ToList(), s => s.Ncc!.Value, Blue, "after alignment");
        AddSeries(plot, record.Sections.Where(s => s.NccBefore is not null).ToList(), s => s.NccBefore!.Value, Before, "before (as mounted)");
        plot.Axes.SetLimitsY(Math.Min(0, record.Sections.Min(s => Math.Min(s.Ncc ?? 0, s.NccBefore ?? 0))) - 0.03, 1.03);
        return Finish(plot, record);
    }

    /// <summary>The estimated placement error (µm): without a template the chain's link errors and its slow drift, with one relative to the template.</summary>
    public static byte[] EstimatedError(BuildRecord record)
    {
        var plot = NewPlot(record.Frame?.Template is null ? "Estimated placement error (chain links and slow drift)"
            : "Estimated placement error (relative to the template)", "error (µm)");
        AddSeries(plot, record.Sections.Where(s => s.EstimatedErrorUm is not null).ToList(), s => s.EstimatedErrorUm!.Value, Blue, "estimate (1 standard error)");
        plot.Axes.SetLimitsY(0, Math.Max(1, record.Sections.Max(s => s.EstimatedErrorUm ?? 0)) * 1.08);
        return Finish(plot, record);
    }

    private static Plot NewPlot(string title, string yLabel)
    {
        var plot = new Plot();
        plot.Font.Set("DejaVu Sans"); // fonts-dejavu-core; ScottPlot's default may pick a serif face
        plot.Title(title, size: 14);
        plot.YLabel(yLabel, size: 12);
        plot.XLabel("section number", size: 12);
        plot.FigureBackground.Color = Colors.White;
        plot.Grid.MajorLineColor = Color.FromHex("#e2e8f0");
        return plot;
    }

    private static void AddSeries(Plot plot, IReadOnlyList<SectionRecord> sections, Func<SectionRecord, double> value, Color color, string legend, bool lines = true) =>
        AddPoints(plot, sections.Select(s => (s.Number, value(s))).ToList(), color, legend, lines);

    /// <summary>
    /// Markers at every point and, when <paramref name="lines"/>, lines joining only consecutive section numbers: a
    /// line never crosses a gap, an excluded section or a section without a value.
    /// </summary>
    private static void AddPoints(Plot plot, IReadOnlyList<(int Number, double Value)> points, Color color, string legend, bool lines = true)
    {
        if (points.Count == 0) return;
        var markers = plot.Add.Scatter(points.Select(p => (double)p.Number).ToArray(), points.Select(p => p.Value).ToArray());
        markers.Color = color;
        markers.LineWidth = 0;
        markers.MarkerSize = 5;
        markers.LegendText = legend;
        if (!lines) return;
        foreach (var run in Runs(points.Select(p => p.Number).ToList()))
        {
            if (run.Count < 2) continue;
            var line = plot.Add.Scatter(run.Select(i => (double)points[i].Number).ToArray(), run.Select(i => points[i].Value).ToArray());
            line.Color = color;
            line.LineWidth = 1;
            line.MarkerSize = 0;
        }
    }

    /// <summary>Indices of <paramref name="numbers"/> (ascending section numbers) split into runs of consecutive numbers.</summary>
    internal static List<List<int>> Runs(IReadOnlyList<int> numbers)
    {
        var runs = new List<List<int>>();
        for (int i = 0; i < numbers.Count; i++)
        {
            if (i == 0 || numbers[i] != numbers[i - 1] + 1) runs.Add([]);
            runs[^1].Add(i);
        }
        return runs;
    }

    private static void Limit(Plot plot, double y, Color color, string legend)
    {
        var line = plot.Add.HorizontalLine(y);
        line.Color = color;
        line.LineWidth = 1;
        line.LinePattern = LinePattern.Dashed;
        line.LegendText = legend;
    }

    private static byte[] Finish(Plot plot, BuildRecord record)
    {
        if (record.Sections.Count > 0)
            plot.Axes.SetLimitsX(record.Sections.Min(s => s.Number) - 0.5, record.Sections.Max(s => s.Number) + 0.5);
        plot.ShowLegend(Edge.Right); // beside the data, never over it
        return plot.GetImageBytes(Width, Height, ImageFormat.Png);
    }
}
