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

    private static IEnumerable<SectionRecord> Placed(BuildRecord r) => r.Sections.Where(s => s.Status is "aligned" or "placed");

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

    /// <summary>In-plane rotation of each placed section (degrees), mirrored sections marked apart.</summary>
    public static byte[] Rotation(BuildRecord record)
    {
        var plot = NewPlot("Rotation applied to each section", "rotation (°)");
        var placed = Placed(record).Where(s => s.RotationDegrees is not null).ToList();
        AddSeries(plot, placed.Where(s => s.Mirrored != true).ToList(), s => s.RotationDegrees!.Value, Blue, "face up");
        AddSeries(plot, placed.Where(s => s.Mirrored == true).ToList(), s => s.RotationDegrees!.Value, Orange, "mirrored (face down)", lines: false);
        AddSeries(plot, placed.Where(s => s.ChainRotationDegrees is not null).ToList(), s => s.ChainRotationDegrees!.Value, Before, "before drift correction", lines: false);
        return Finish(plot, record);
    }

    /// <summary>Translation of each section's image origin in the output plane (µm).</summary>
    public static byte[] Translation(BuildRecord record)
    {
        var plot = NewPlot("Translation applied to each section (image origin in the output plane)", "translation (µm)");
        double um = record.VoxelSizeMm.Length > 0 ? record.VoxelSizeMm[0] * 1000 : 1;
        var placed = Placed(record).Where(s => s.ShiftPx is { Length: 2 }).ToList();
        AddSeries(plot, placed, s => s.ShiftPx![0] * um, Blue, "along image x (right)");
        AddSeries(plot, placed, s => s.ShiftPx![1] * um, Orange, "along image y (down)");
        var chained = placed.Where(s => s.ChainShiftPx is { Length: 2 }).ToList();
        AddSeries(plot, chained, s => s.ChainShiftPx![0] * um, Before, "x before drift correction", lines: false);
        AddSeries(plot, chained, s => s.ChainShiftPx![1] * um, Before, "y before drift correction", lines: false);
        return Finish(plot, record);
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

    /// <summary>The estimated placement error relative to the reference section (µm).</summary>
    public static byte[] EstimatedError(BuildRecord record)
    {
        var plot = NewPlot(record.Frame?.Template is null ? "Estimated placement error (relative to the reference section)"
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

    private static void AddSeries(Plot plot, IReadOnlyList<SectionRecord> sections, Func<SectionRecord, double> value, Color color, string legend, bool lines = true)
    {
        if (sections.Count == 0) return;
        var scatter = plot.Add.Scatter(sections.Select(s => (double)s.Number).ToArray(), sections.Select(value).ToArray());
        scatter.Color = color;
        scatter.LineWidth = lines ? 1 : 0;
        scatter.MarkerSize = 5;
        scatter.LegendText = legend;
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
