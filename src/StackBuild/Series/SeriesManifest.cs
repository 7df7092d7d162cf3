using System.Globalization;
using System.Text;
using StackBuild.IO;

namespace StackBuild.Series;

/// <summary>One data row of a manifest. <see cref="File"/> is null when the row leaves it empty (a lost section).</summary>
internal sealed record ManifestRow(
    int Line,
    int Section,
    string? File,
    double? PositionUm,
    double? PixelSizeUm,
    bool? Mirrored,
    bool Exclude,
    bool Damaged,
    string Note);

/// <summary>
/// The series manifest: CSV in UTF-8 with a header row; header names case-insensitive in any order; blank lines
/// ignored; lines starting with <c>#</c> are comments except the setting lines <c>#! pixel_size_um = 4.0</c> and
/// <c>#! spacing_um = 50</c>. Columns: <c>section</c> and <c>file</c> (required), <c>position_um</c>,
/// <c>pixel_size_um</c>, <c>mirrored</c> (empty = unknown), <c>exclude</c>, <c>damaged</c>, <c>note</c>.
/// Fields may be quoted ("a, b" and "" for a quote inside). Yes/no values: yes/no/y/n/true/false/1/0.
/// A quoted field cannot run over a line break (each row is one line, so problems can name their line).
/// A manifest with no header row (only settings and comments) has no table: the files are then found by name.
/// </summary>
internal sealed record SeriesManifest(string Display, bool HasTable, double? PixelSizeUm, double? SpacingUm, IReadOnlyList<ManifestRow> Rows)
{
    public const string DefaultName = "manifest.csv";

    /// <summary>Setting lines that were present but refused (a problem was reported for each), so no second problem says the value is missing.</summary>
    public IReadOnlySet<string> RefusedSettings { get; init; } = new HashSet<string>();

    private static readonly string[] Columns = ["section", "file", "position_um", "pixel_size_um", "mirrored", "exclude", "damaged", "note"];
    private static readonly string[] Settings = ["pixel_size_um", "spacing_um"];

    /// <summary>Reads the manifest, adding one problem per bad line to <paramref name="problems"/> (rows with problems are left out).</summary>
    public static SeriesManifest Read(string path, string display, List<InputProblemException> problems)
    {
        string text;
        var bytes = File.ReadAllBytes(path);
        if (bytes.Length >= 2 && (bytes[0], bytes[1]) is (0xFF, 0xFE) or (0xFE, 0xFF))
        {
            // What spreadsheets save as "Unicode text": name it, since "not UTF-8" alone does not say what to change.
            problems.Add(new InputProblemException(display, "is UTF-16 text, not UTF-8", "save it again as 'CSV UTF-8 (comma-separated)'"));
            return new SeriesManifest(display, true, null, null, []);
        }
        try
        {
            text = new UTF8Encoding(false, throwOnInvalidBytes: true).GetString(bytes);
        }
        catch (DecoderFallbackException)
        {
            problems.Add(new InputProblemException(display, "is not UTF-8 text (another encoding, such as Latin-1)", "save it again as CSV with UTF-8 encoding"));
            return new SeriesManifest(display, true, null, null, []);
        }
        if (text.Length > 0 && text[0] == '\uFEFF') text = text[1..];

        var settings = new Dictionary<string, (double Value, int Line)>();
        var refused = new HashSet<string>();
        var rows = new List<ManifestRow>();
        string[]? header = null;
        bool headerUsable = false;
        var lines = text.Split('\n');
        for (int index = 0; index < lines.Length; index++)
        {
            int lineNumber = index + 1;
            string where = $"{display}:{lineNumber}";
            string line = lines[index].TrimEnd('\r');
            string trimmed = line.Trim();
            if (trimmed.Length == 0) continue;
            if (trimmed.StartsWith("#!", StringComparison.Ordinal))
            {
                ReadSetting(trimmed[2..], where, lineNumber, settings, refused, problems);
                continue;
            }
            if (trimmed[0] == '#') continue;

            if (!TrySplit(line, out var fields, out var splitProblem))
            {
                problems.Add(new InputProblemException(where, splitProblem,
                    "a quoted value starts and ends with \" on the same line, with \"\" for a quote inside it"));
                if (header is null) return new SeriesManifest(display, true, null, null, []);
                continue;
            }
            if (header is null)
            {
                header = [.. fields.Select(f => f.Trim().ToLowerInvariant())];
                headerUsable = CheckHeader(header, trimmed, where, problems);
                continue;
            }
            if (!headerUsable) continue;
            if (ReadRow(fields, header, where, lineNumber, problems) is { } row) rows.Add(row);
        }
        return new SeriesManifest(display, header is not null,
            settings.TryGetValue("pixel_size_um", out var px) ? px.Value : null,
            settings.TryGetValue("spacing_um", out var sp) ? sp.Value : null,
            rows) { RefusedSettings = refused };
    }

    private static void ReadSetting(string body, string where, int line, Dictionary<string, (double, int)> settings, HashSet<string> refused,
        List<InputProblemException> problems)
    {
        int eq = body.IndexOf('=');
        string key = (eq < 0 ? body : body[..eq]).Trim().ToLowerInvariant();
        string value = eq < 0 ? "" : body[(eq + 1)..].Trim();
        if (!Settings.Contains(key))
        {
            problems.Add(new InputProblemException(where, $"unknown setting '{key}'",
                $"setting lines are '#! pixel_size_um = 4.0' and '#! spacing_um = 50'; start other comments with '#' alone"));
            return;
        }
        if (eq < 0 || !TryPositive(value, out double number))
        {
            refused.Add(key);
            problems.Add(new InputProblemException(where, $"{key} needs a positive number in micrometres, not '{value}'",
                $"write it as '#! {key} = 4.0' (a dot for decimals)"));
            return;
        }
        if (settings.TryGetValue(key, out var earlier) && earlier.Item1 != number)
        {
            problems.Add(new InputProblemException(where, $"{key} is set again to {Number(number)} (line {earlier.Item2} sets {Number(earlier.Item1)})",
                "keep one setting line"));
            return;
        }
        settings[key] = (number, line);
    }

    private static bool CheckHeader(string[] header, string line, string where, List<InputProblemException> problems)
    {
        if (header.Length == 1 && line.Contains(';'))
        {
            problems.Add(new InputProblemException(where, "the header is separated by semicolons",
                "separate the columns with commas (save as 'CSV UTF-8, comma-separated')"));
            return false;
        }
        bool usable = true;
        var known = string.Join(", ", Columns);
        foreach (var name in header.Where(h => !Columns.Contains(h)).Distinct())
            problems.Add(new InputProblemException(where, $"unknown column '{name}'", $"use only the columns {known}"));
        foreach (var name in header.GroupBy(h => h).Where(g => g.Count() > 1 && g.Key.Length > 0).Select(g => g.Key))
        {
            problems.Add(new InputProblemException(where, $"the column '{name}' appears more than once", "keep one column of each name"));
            usable = false;
        }
        foreach (var required in new[] { "section", "file" }.Where(r => !header.Contains(r)))
        {
            problems.Add(new InputProblemException(where, $"the header has no '{required}' column",
                "the header needs at least: section,file (file empty for a lost section)"));
            usable = false;
        }
        return usable;
    }

    private static ManifestRow? ReadRow(List<string> fields, string[] header, string where, int line, List<InputProblemException> problems)
    {
        if (fields.Count > header.Length)
        {
            problems.Add(new InputProblemException(where, $"has {fields.Count} values but the header names {header.Length} columns",
                "put double quotes around values that contain commas, or remove the extra values"));
            return null;
        }
        string Get(string column)
        {
            int i = Array.IndexOf(header, column);
            return i >= 0 && i < fields.Count ? fields[i] : "";
        }
        int before = problems.Count;
        void Bad(string problem, string remedy) => problems.Add(new InputProblemException(where, problem, remedy));

        string sectionText = Get("section").Trim();
        int section = 0;
        if (sectionText.Length == 0) Bad("the section number is empty", "give every row a whole section number");
        else if (!int.TryParse(sectionText, NumberStyles.None, CultureInfo.InvariantCulture, out section))
            Bad($"section '{sectionText}' is not a whole number of zero or more", "give the section number as digits, for example 12");

        double? position = null, pixelSize = null;
        string positionText = Get("position_um").Trim();
        if (positionText.Length > 0)
        {
            if (TryNumber(positionText, out double p)) position = p;
            else Bad($"position_um '{positionText}' is not a number", "give micrometres with a dot for decimals, or leave it empty");
        }
        string pixelText = Get("pixel_size_um").Trim();
        if (pixelText.Length > 0)
        {
            if (TryPositive(pixelText, out double s)) pixelSize = s;
            else Bad($"pixel_size_um '{pixelText}' is not a positive number", "give micrometres per pixel with a dot for decimals, or leave it empty");
        }
        bool? mirrored = YesNo("mirrored", Get("mirrored"), Bad);
        bool exclude = YesNo("exclude", Get("exclude"), Bad) ?? false;
        bool damaged = YesNo("damaged", Get("damaged"), Bad) ?? false;
        if (problems.Count > before) return null;
        string file = Get("file").Trim();
        return new ManifestRow(line, section, file.Length == 0 ? null : file, position, pixelSize, mirrored, exclude, damaged, Get("note").Trim());
    }

    private static bool? YesNo(string column, string text, Action<string, string> bad)
    {
        switch (text.Trim().ToLowerInvariant())
        {
            case "": return null;
            case "yes" or "y" or "true" or "1": return true;
            case "no" or "n" or "false" or "0": return false;
            default:
                bad($"{column} '{text.Trim()}' is not yes or no", "write yes or no (or y/n, true/false, 1/0), or leave it empty");
                return null;
        }
    }

    /// <summary>One CSV field as written: in double quotes (a quote doubled) when it holds a comma, a quote or a line break.</summary>
    internal static string Quote(string field) =>
        field.IndexOfAny([',', '"', '\n', '\r']) >= 0 ? "\"" + field.Replace("\"", "\"\"") + "\"" : field;

    /// <summary>Splits one CSV line: commas separate; a field in double quotes may hold commas and "" for a quote.</summary>
    internal static bool TrySplit(string line, out List<string> fields, out string problem)
    {
        fields = [];
        problem = "";
        var field = new StringBuilder();
        int i = 0;
        while (true)
        {
            field.Clear();
            while (i < line.Length && line[i] is ' ' or '\t') i++;
            if (i < line.Length && line[i] == '"')
            {
                int start = i++;
                while (true)
                {
                    if (i >= line.Length)
                    {
                        problem = $"a quote opened at column {start + 1} is not closed";
                        return false;
                    }
                    if (line[i] == '"')
                    {
                        if (i + 1 < line.Length && line[i + 1] == '"') { field.Append('"'); i += 2; continue; }
                        i++;
                        break;
                    }
                    field.Append(line[i++]);
                }
                while (i < line.Length && line[i] is ' ' or '\t') i++;
                if (i < line.Length && line[i] != ',')
                {
                    problem = $"unexpected text after the closing quote at column {i + 1}";
                    return false;
                }
                fields.Add(field.ToString());
            }
            else
            {
                int comma = line.IndexOf(',', i);
                int end = comma < 0 ? line.Length : comma;
                fields.Add(line[i..end].Trim());
                i = end;
            }
            if (i >= line.Length) return true;
            i++; // past the comma
        }
    }

    private static bool TryNumber(string text, out double value) =>
        double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out value) && double.IsFinite(value);

    private static bool TryPositive(string text, out double value) => TryNumber(text, out value) && value > 0;

    internal static string Number(double value) => value.ToString("0.####", CultureInfo.InvariantCulture);
}
