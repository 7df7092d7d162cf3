using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Encodings.Web;
using System.Text.Json;
using StackBuild.Nifti;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild info FILE [--json]</c>: what a NIfTI-1 volume holds, for a person or a script.</summary>
public static class InfoCommand
{
    // One line, so scripts can read it line by line; relaxed escaping keeps "µm" readable (the output is not embedded in HTML).
    private static readonly JsonSerializerOptions Json = new()
    {
        PropertyNamingPolicy = JsonNamingPolicy.CamelCase,
        Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping,
    };

    public static Command Create(CliOutput console)
    {
        var file = new Argument<string>("file") { Description = "A NIfTI-1 volume (.nii or .nii.gz)" };
        var json = new Option<bool>("--json") { Description = "Print one JSON object with the same fields instead of text" };
        var command = new Command("info",
            "Show what a NIfTI-1 volume holds: size in voxels and mm, voxel size, data type, value range, " +
            "orientation (axis codes and the voxel-to-mm affine) and description. A build's volume whose sidecar (the .json of the same " +
            "name beside it) records another checksum is refused: it was changed or replaced after the build.\n\n" +
            "Examples:\n  stackbuild info volume.nii.gz\n  stackbuild info volume.nii.gz --json");
        command.Arguments.Add(file);
        command.Options.Add(json);
        command.SetAction(parse => console.Guard(() =>
        {
            var path = parse.GetValue(file)!;
            var summary = NiftiSummary.Read(path);
            // A build's volume is shown only while it is the one its sidecar was written with.
            StackBuild.Pipeline.SidecarFile.CheckBeside(path);
            console.Out.Write(parse.GetValue(json) ? JsonSerializer.Serialize(summary, Json) + Environment.NewLine : Text(summary));
            return CliOutput.ExitOk;
        }));
        return command;
    }

    /// <summary>The summary laid out for reading: one fact per line, mm first with µm beside small sizes.</summary>
    public static string Text(NiftiSummary s)
    {
        var t = new StringBuilder();
        void Line(string label, string value) => t.Append("  ").Append(label.PadRight(14)).Append(value).Append('\n');

        t.Append(s.File).Append('\n');
        var size = string.Join(" × ", s.Shape.Take(3)) + " voxels";
        if (s.Volumes > 1) size += $", {s.Volumes} volumes";
        Line("Size", size);
        Line("Voxel size", $"{Join(s.VoxelSizeMm)} mm" + (s.VoxelSizeMm.Max() < 1 ? $"  ({Join(s.VoxelSizeMm.Select(v => v * 1000))} µm)" : ""));
        Line("Extent", $"{Join(s.ExtentMm)} mm");
        Line("Data type", $"{s.DataType}, {s.BitsPerVoxel} bits per voxel" + (s.BigEndian ? ", big-endian" : ""));
        Line("Values", (s.DataMin is { } min && s.DataMax is { } max ? $"{Number(min)} to {Number(max)}" : "no finite values")
            + (s.DataType == "rgb24" ? " (grey luminance, ITU-R BT.601 weights)" : ""));
        Line("Scaling", s.ScaleSlope is { } slope
            ? $"value = stored × {Number(slope)} + {Number(s.ScaleIntercept ?? 0)}"
            : "none (stored values are the values)");
        Line("Display range", s.CalMin == 0 && s.CalMax == 0 ? "not set" : $"{Number(s.CalMin)} to {Number(s.CalMax)}");
        Line("Axis codes", $"{s.AxisCodes}: {AxisWords(s.AxisCodes)}");
        var geometry = s.AffineSource switch
        {
            "sform" => $"from the sform (code {s.SformCode}, {NiftiSummary.XformCodeName(s.SformCode)})",
            "qform" => $"from the qform (code {s.QformCode}, {NiftiSummary.XformCodeName(s.QformCode)}); no sform",
            _ => "from the voxel sizes only: no qform or sform, so the position in space is unknown",
        };
        if (s.QformSformDifferenceMm is { } d)
            geometry += d <= 1e-3 ? "; the qform agrees" : $"; the qform differs by up to {Number(d)} mm";
        else if (s.AffineSource == "sform")
            geometry += s.QformCode == 0 ? "; no qform" : "";
        Line("Geometry", geometry);
        Line("Affine", "voxel (i, j, k) → RAS+ mm");
        // Below 0.1 nm is rounding noise from the float32 header (e.g. a qform's quaternion): shown as 0, kept in --json.
        var cells = s.AffineMm.Select(row => row.Select(v => Number(Math.Abs(v) < 1e-7 ? 0 : v)).ToArray()).ToArray();
        int width = cells.SelectMany(r => r).Max(c => c.Length);
        foreach (var row in cells)
            Line("", "[ " + string.Join("  ", row.Select(c => c.PadLeft(width))) + " ]");
        Line("Description", s.Description.Length == 0 ? "(none)" : s.Description);
        Line("Header unit", s.HeaderUnit switch
        {
            "mm" => "mm",
            "µm" or "m" => $"{s.HeaderUnit} (shown here in mm)",
            _ => "not set (read as mm)",
        });
        return t.ToString();
    }

    private static string AxisWords(string codes)
    {
        string[] axes = ["i (image x)", "j (image y)", "k (section)"];
        return string.Join(", ", codes.Select((c, n) => $"{axes[n]} → " + c switch
        {
            'R' => "Right", 'L' => "Left", 'A' => "Anterior", 'P' => "Posterior", 'S' => "Superior", _ => "Inferior",
        }));
    }

    private static string Join(IEnumerable<double> values) => string.Join(" × ", values.Select(Number));

    /// <summary>Up to six significant digits (all digits of large whole numbers), no exponent for everyday sizes.</summary>
    private static string Number(double v)
    {
        if (v == 0) return "0";
        double a = Math.Abs(v);
        if (a >= 1e5 && a < 1e15 && v == Math.Round(v)) return v.ToString("0", CultureInfo.InvariantCulture);
        if (a >= 1e-4 && a < 1e7)
        {
            int decimals = Math.Clamp(5 - (int)Math.Floor(Math.Log10(a)), 0, 10);
            return Math.Round(v, decimals).ToString("0." + new string('#', decimals), CultureInfo.InvariantCulture);
        }
        return v.ToString("G6", CultureInfo.InvariantCulture);
    }
}
