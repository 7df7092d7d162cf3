using System.Globalization;
using System.Text;
using StackBuild.Geometry;
using StackBuild.IO;
using StackBuild.Series;

namespace StackBuild.Pipeline;

/// <summary>A point of a section's scan in the volume: voxel (i, j, k) and world (x, y, z), RAS+ mm.</summary>
public readonly record struct VolumePoint(double I, double J, double K, double X, double Y, double Z);

/// <summary>A world point taken back to the nearest placed section: its scan pixel and how far (mm) the point lies off its plane.</summary>
public readonly record struct ScanPoint(int Section, double X, double Y, double OffPlaneMm);

/// <summary>
/// Positions marked on the scans (cells, a track, an outline) carried through a build's stored placements: scan pixel
/// (x right, y down, (0, 0) the centre of the top-left pixel, the full-resolution input the build read) → the section's
/// matrix → voxel (i, j) of its plane → the affine → world mm; and back.
/// </summary>
public sealed class PointMapping
{
    private readonly Dictionary<int, SectionRecord> _sections;
    private readonly List<(SectionRecord Record, double K, Transform2D PlaneToScan)> _placed;
    private readonly Affine _affine, _worldToVoxel;

    /// <summary>The mapping of one build; refuses (<see cref="InputProblemException"/>) a sidecar without geometry or placed sections.</summary>
    public PointMapping(BuildRecord build, string sidecarPath)
    {
        (_, _, _, _affine) = SidecarFile.Geometry(build, sidecarPath);
        _worldToVoxel = _affine.Inverse();
        _sections = build.Sections.GroupBy(s => s.Number).ToDictionary(g => g.Key, g => g.First());
        _placed = build.Sections.Where(s => s.Matrix is not null)
            .Select(s => (s, PlaneK(s), Transform2D.FromRows(s.Matrix!).Inverse())).ToList();
        if (_placed.Count == 0)
            throw new InputProblemException(sidecarPath, "no section of this build has a placement", "give the sidecar of a build in which sections were placed");
    }

    /// <summary>The section's plane along the volume's k axis (fractional when the planes were resampled).</summary>
    private static double PlaneK(SectionRecord s) => s.VolumeZ ?? s.ZIndex;

    /// <summary>
    /// Where scan pixel (<paramref name="x"/>, <paramref name="y"/>) of section <paramref name="section"/> lies in the volume;
    /// null with the reason when the section is unknown or has no placement.
    /// </summary>
    public VolumePoint? ToVolume(int section, double x, double y, out string? why)
    {
        why = null;
        if (!_sections.TryGetValue(section, out var s))
        {
            why = $"the build has no section {section} (its sections are {SectionNumbers.Runs(_sections.Keys)})";
            return null;
        }
        if (s.Matrix is null)
        {
            why = $"section {section} has no placement in the build (its status is {s.Status.Word()})";
            return null;
        }
        var (i, j) = Transform2D.FromRows(s.Matrix).Apply(x, y);
        double k = PlaneK(s);
        var (wx, wy, wz) = _affine.Apply(i, j, k);
        return new VolumePoint(i, j, k, wx, wy, wz);
    }

    /// <summary>
    /// The placed section whose plane is nearest to world point (<paramref name="x"/>, <paramref name="y"/>,
    /// <paramref name="z"/>) mm (the lower number when two are equally near), and the point in its scan pixels.
    /// </summary>
    public ScanPoint ToScan(double x, double y, double z)
    {
        var (i, j, k) = _worldToVoxel.Apply(x, y, z);
        var nearest = _placed.MinBy(p => (Math.Abs(p.K - k), p.Record.Number));
        var (sx, sy) = nearest.PlaneToScan.Apply(i, j);
        // Off the plane along the k axis, in mm: the world distance between the point and its foot on the plane.
        var foot = _affine.Apply(i, j, nearest.K);
        double off = Math.Sqrt((foot.X - x) * (foot.X - x) + (foot.Y - y) * (foot.Y - y) + (foot.Z - z) * (foot.Z - z));
        return new ScanPoint(nearest.Record.Number, sx, sy, off);
    }

    /// <summary>
    /// Maps a CSV table of marks. Forward: columns section, x, y (scan pixels) → the same rows with i, j, k, x_mm, y_mm,
    /// z_mm appended. Inverse: columns x_mm, y_mm, z_mm → the same rows with nearest_section, scan_x, scan_y,
    /// off_plane_mm appended. Other columns are carried through unchanged; empty lines are dropped. Column names are
    /// matched without regard to case. Refuses (<see cref="InputProblemsException"/>, one line per bad row, up to 20)
    /// missing columns, non-numeric values and unknown or unplaced sections, naming <paramref name="csvPath"/> and the row.
    /// </summary>
    public string MapCsv(string csvPath, string text, bool inverse)
    {
        string[] wanted = inverse ? ["x_mm", "y_mm", "z_mm"] : ["section", "x", "y"];
        string[] added = inverse ? ["nearest_section", "scan_x", "scan_y", "off_plane_mm"] : ["i", "j", "k", "x_mm", "y_mm", "z_mm"];
        var lines = text.Replace("\r\n", "\n", StringComparison.Ordinal).Split('\n');
        int headerAt = Array.FindIndex(lines, l => l.Trim().Length > 0);
        if (headerAt < 0)
            throw new InputProblemException(csvPath, "the file is empty", $"write a header line with the columns {string.Join(", ", wanted)}, then one row per mark");
        if (!SeriesManifest.TrySplit(lines[headerAt].TrimStart('\uFEFF'), out var header, out var headerProblem))
            throw new InputProblemException(csvPath, $"line {headerAt + 1} (the header): {headerProblem}", "close the quote or remove it");
        var names = header.Select(h => h.Trim().ToLowerInvariant()).ToList();
        var missing = wanted.Where(w => !names.Contains(w)).ToList();
        if (missing.Count > 0)
            throw new InputProblemException(csvPath, $"line {headerAt + 1} (the header) has no column {string.Join(", ", missing)}",
                $"name the columns {string.Join(", ", wanted)} in the first line{(inverse ? " (world positions in mm, RAS+)" : " (section number, scan pixel x right and y down)")}");
        var clash = added.Where(names.Contains).ToList();
        if (clash.Count > 0)
            throw new InputProblemException(csvPath, $"line {headerAt + 1} (the header) already has the column{(clash.Count == 1 ? "" : "s")} {string.Join(", ", clash)} that this mapping adds",
                "rename or remove that column");
        var at = wanted.Select(w => names.IndexOf(w)).ToArray();

        var output = new StringBuilder();
        output.Append(string.Join(',', header.Concat(added).Select(SeriesManifest.Quote))).Append('\n');
        var problems = new List<InputProblemException>();
        for (int n = headerAt + 1; n < lines.Length && problems.Count < 20; n++)
        {
            if (lines[n].Trim().Length == 0) continue;
            void Bad(string problem, string remedy) => problems.Add(new InputProblemException(csvPath, $"line {n + 1}: {problem}", remedy));
            if (!SeriesManifest.TrySplit(lines[n], out var fields, out var splitProblem)) { Bad(splitProblem, "close the quote or remove it"); continue; }
            if (fields.Count < header.Count)
            {
                Bad($"{fields.Count} fields where the header has {header.Count}", "give every row a value for each column (an empty one between two commas)");
                continue;
            }
            var values = new double[3];
            bool ok = true;
            for (int c = 0; c < 3; c++)
            {
                string raw = fields[at[c]].Trim();
                if (!double.TryParse(raw, NumberStyles.Float, CultureInfo.InvariantCulture, out values[c]) || !double.IsFinite(values[c]))
                {
                    Bad($"{wanted[c]} '{raw}' is not a number", "write numbers with a point for decimals, e.g. 120.5");
                    ok = false;
                    break;
                }
            }
            if (!ok) continue;
            string[] result;
            if (inverse)
            {
                var p = ToScan(values[0], values[1], values[2]);
                result = [p.Section.ToString(CultureInfo.InvariantCulture), Num(p.X), Num(p.Y), Num(p.OffPlaneMm)];
            }
            else
            {
                if (values[0] != Math.Round(values[0]))
                {
                    Bad($"section '{fields[at[0]].Trim()}' is not a whole section number", "give the section's number as the build numbered it");
                    continue;
                }
                if (ToVolume((int)values[0], values[1], values[2], out var why) is not { } p)
                {
                    Bad(why!, "give a section the build placed (stackbuild evaluate, or the sidecar's sections, lists them), or leave the row out");
                    continue;
                }
                result = [Num(p.I), Num(p.J), Num(p.K), Num(p.X), Num(p.Y), Num(p.Z)];
            }
            output.Append(string.Join(',', fields.Take(header.Count).Select(SeriesManifest.Quote).Concat(result))).Append('\n');
        }
        if (problems.Count == 1) throw problems[0];
        if (problems.Count > 1) throw new InputProblemsException(problems);
        return output.ToString();
    }

    private static string Num(double v) => (Math.Round(v, 9) + 0.0).ToString("R", CultureInfo.InvariantCulture);
}
