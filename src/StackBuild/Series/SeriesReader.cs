using System.Globalization;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Numerics;

namespace StackBuild.Series;

/// <summary>
/// Finds a section series in a folder (or through its manifest), identifies every image from its header,
/// orders the sections by number, makes missing numbers explicit gaps and works out positions, spacing and
/// pixel size. Nothing is decoded and no input file is changed. All problems found are raised together as one
/// <see cref="InputProblemsException"/> (one line each: file, what is wrong, what to do).
/// </summary>
public static class SeriesReader
{
    /// <summary>Section numbers spanning more than this are taken as a naming mistake rather than a series with gaps.</summary>
    public const int MaxNumberRange = 100_000;

    private const string NamingRemedy =
        "rename the files so that the last digits in each name are its section number (for example brain_s012.png), or list the files in a manifest.csv with a section column";

    private sealed class Candidate(int number, string? display, string where, ManifestRow? row)
    {
        public int Number { get; } = number;

        /// <summary>The file as the user would write it (input folder or manifest folder joined with the name); null for a lost section.</summary>
        public string? Display { get; } = display;

        /// <summary>Where problems about this section point: the file, or manifest:line.</summary>
        public string Where { get; } = where;

        public ManifestRow? Row { get; } = row;
        public ImageFacts? Facts { get; set; }
        public FileStamp? Listed { get; set; }

        public SectionStatus Status =>
            Display is null ? SectionStatus.Gap : Row?.Exclude == true ? SectionStatus.Excluded : SectionStatus.Present;
    }

    /// <summary>
    /// The section number in a file name: the LAST run of ASCII digits in the name without its extension, so
    /// <c>brainA_s012.png</c> is 12 and <c>brainA_s012_x40.png</c> is 40 (not 12). Names that carry another
    /// number last need renaming or a manifest. Null when the name has no digits or the number is too large.
    /// </summary>
    public static int? SectionNumberFromFileName(string fileName)
    {
        var stem = Path.GetFileNameWithoutExtension(fileName);
        int end = stem.Length;
        while (end > 0 && !char.IsAsciiDigit(stem[end - 1])) end--;
        if (end == 0) return null;
        int start = end;
        while (start > 0 && char.IsAsciiDigit(stem[start - 1])) start--;
        return int.TryParse(stem.AsSpan(start, end - start), NumberStyles.None, CultureInfo.InvariantCulture, out int n) ? n : null;
    }

    /// <summary>
    /// Opens a series from a folder of section images (using its <c>manifest.csv</c> when there is one, or the
    /// manifest that <paramref name="options"/> names) or from a manifest file.
    /// </summary>
    public static SectionSeries Open(string folderOrManifest, SeriesOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        var problems = new List<InputProblemException>();
        var warnings = new List<string>();
        CheckOption(options.PixelSizeUm, "--pixel-size", "micrometres per image pixel", problems);
        CheckOption(options.SpacingUm, "--spacing", "micrometres between consecutive section numbers", problems);
        var (folder, manifestPath) = Locate(folderOrManifest, options);

        SeriesManifest? manifest = manifestPath is null ? null : SeriesManifest.Read(manifestPath, manifestPath, problems);
        // A manifest with only setting lines (no table) gives settings for the files found by name.
        var candidates = manifest is { HasTable: true }
            ? FromManifest(manifest, folder, problems, warnings)
            : FromFolder(folder, problems);
        string seriesWhere = manifestPath ?? folder;
        string manifestName = manifestPath is null ? SeriesManifest.DefaultName : Path.GetFileName(manifestPath);

        if (candidates.All(c => c.Display is null))
        {
            if (problems.Count == 0)
                problems.Add(manifest is { HasTable: true }
                    ? new InputProblemException(manifestPath, "names no image files", "fill in the file column with the section images")
                    : new InputProblemException(folder, $"no section images ({string.Join(", ", SectionImageReader.Extensions)}) found",
                        "put the section images in this folder (subfolders are not searched), or give the folder that holds them"));
            throw new InputProblemsException(problems);
        }

        candidates = DropDuplicates(candidates, manifest is { HasTable: true }, problems);
        CheckNumberRange(candidates, seriesWhere, problems);
        Identify(candidates, options.MaxPixels, problems, warnings);
        if (candidates.Count > 0 && candidates.All(c => c.Status != SectionStatus.Present) && problems.Count == 0)
            problems.Add(new InputProblemException(seriesWhere, "every section is excluded or lost, so there is nothing to build",
                "set exclude to no for the sections to use"));
        CheckBitDepths(candidates, seriesWhere, problems);

        double? spacing = Spacing(candidates, manifest, options, seriesWhere, manifestName, problems, warnings);
        var pixelSizes = PixelSizes(candidates, manifest, options, seriesWhere, manifestName, problems, warnings);

        if (problems.Count > 0) throw new InputProblemsException(problems);
        var entries = Entries(candidates, spacing!.Value, pixelSizes, options.PixelSizeUm ?? manifest?.PixelSizeUm, out double finest);
        return new SectionSeries(Path.GetFullPath(folder), manifestPath is null ? null : Path.GetFullPath(manifestPath),
            entries, spacing.Value, finest, warnings);
    }

    private static void CheckOption(double? value, string name, string meaning, List<InputProblemException> problems)
    {
        if (value is { } v && !(double.IsFinite(v) && v > 0))
            problems.Add(new InputProblemException(null, $"{name} must be a positive number ({meaning}), not {v.ToString(CultureInfo.InvariantCulture)}",
                $"give for example {name} {(name == "--spacing" ? "50" : "4.0")}"));
    }

    /// <summary>Works out the folder and manifest (as the user would write them); a missing input is a problem on its own.</summary>
    private static (string Folder, string? Manifest) Locate(string input, SeriesOptions options)
    {
        static InputProblemsException One(string? file, string problem, string remedy) =>
            new([new InputProblemException(file, problem, remedy)]);

        if (File.Exists(input))
        {
            if (SectionImageReader.HasImageExtension(input))
                throw One(input, "is a single image, not a series", "give the folder that holds the section images, or its manifest.csv");
            if (options.ManifestPath is { } other && Path.GetFullPath(other) != Path.GetFullPath(input))
                throw One(input, $"is a manifest, and another manifest ({other}) was given as well", "give only one manifest");
            var dir = Path.GetDirectoryName(input);
            return (string.IsNullOrEmpty(dir) ? "." : dir, input);
        }
        if (!Directory.Exists(input))
            throw One(input, "does not exist", "give the folder that holds the section images, or its manifest.csv");
        if (options.ManifestPath is { } named)
        {
            if (!File.Exists(named)) throw One(named, "the manifest does not exist", "check the manifest path, or leave it out to use the folder alone");
            return (input, named);
        }
        var found = Directory.EnumerateFiles(input)
            .Select(Path.GetFileName)
            .FirstOrDefault(n => string.Equals(n, SeriesManifest.DefaultName, StringComparison.OrdinalIgnoreCase));
        return (input, found is null ? null : Path.Combine(input, found));
    }

    private static IEnumerable<string> ImageFileNames(string folder) =>
        Directory.EnumerateFiles(folder)
            .Select(f => Path.GetFileName(f))
            .Where(n => !n.StartsWith('.') && SectionImageReader.HasImageExtension(n))
            .Order(StringComparer.Ordinal);

    private static List<Candidate> FromFolder(string folder, List<InputProblemException> problems)
    {
        var list = new List<Candidate>();
        foreach (var name in ImageFileNames(folder))
        {
            var display = Path.Combine(folder, name);
            if (SectionNumberFromFileName(name) is int number)
                list.Add(new Candidate(number, display, display, null));
            else
                problems.Add(new InputProblemException(display,
                    Path.GetFileNameWithoutExtension(name).Any(char.IsAsciiDigit) ? "the number in its name is too large to be a section number" : "has no section number in its name",
                    NamingRemedy));
        }
        return list;
    }

    private static List<Candidate> FromManifest(SeriesManifest manifest, string folder, List<InputProblemException> problems, List<string> warnings)
    {
        string manifestFolder = Path.GetDirectoryName(manifest.Display) ?? "";
        var list = new List<Candidate>();
        var lineOfFile = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var row in manifest.Rows)
        {
            string where = $"{manifest.Display}:{row.Line}";
            if (row.File is null)
            {
                list.Add(new Candidate(row.Section, null, where, row));
                continue;
            }
            var display = Path.IsPathRooted(row.File) ? row.File : Path.Combine(manifestFolder, row.File);
            if (!File.Exists(display))
            {
                problems.Add(new InputProblemException(where, $"the file '{row.File}' does not exist",
                    "check the name (relative to the manifest's folder), or leave file empty for a lost section"));
                continue;
            }
            var full = Path.GetFullPath(display);
            if (lineOfFile.TryGetValue(full, out int earlier))
            {
                problems.Add(new InputProblemException(where, $"names '{row.File}' again (line {earlier} names it too)", "give each file one row"));
                continue;
            }
            lineOfFile[full] = row.Line;
            list.Add(new Candidate(row.Section, display, where, row));
        }
        foreach (var name in ImageFileNames(folder))
        {
            var display = Path.Combine(folder, name);
            if (!lineOfFile.ContainsKey(Path.GetFullPath(display)))
                warnings.Add(InputProblemException.Format(display, $"is in the folder but not named in {Path.GetFileName(manifest.Display)}, so it is not used",
                    "add a row for it if it is a section"));
        }
        return list;
    }

    private static List<Candidate> DropDuplicates(List<Candidate> candidates, bool fromManifest, List<InputProblemException> problems)
    {
        var kept = new List<Candidate>();
        foreach (var group in candidates.GroupBy(c => c.Number))
        {
            var first = group.First();
            kept.Add(first);
            var others = group.Skip(1).ToList();
            if (others.Count == 0) continue;
            if (fromManifest)
            {
                foreach (var again in others)
                    problems.Add(new InputProblemException(again.Where,
                        $"section {group.Key} is listed again ({Describe(again)}; line {first.Row!.Line} has {Describe(first)})",
                        "give each section number one row"));
            }
            else
            {
                problems.Add(new InputProblemException(first.Display,
                    $"has section number {group.Key}, as {string.Join(" and ", others.Select(o => o.Display))} {(others.Count == 1 ? "has" : "have")} too",
                    NamingRemedy));
            }
        }
        return [.. kept.OrderBy(c => c.Number)];

        static string Describe(Candidate c) => c.Row?.File is { } f ? $"file {f}" : "no file";
    }

    private static void CheckNumberRange(List<Candidate> candidates, string where, List<InputProblemException> problems)
    {
        if (candidates.Count == 0) return;
        long span = (long)candidates[^1].Number - candidates[0].Number + 1;
        if (span > MaxNumberRange)
            problems.Add(new InputProblemException(where,
                $"section numbers run from {candidates[0].Number} ({candidates[0].Where}) to {candidates[^1].Number} ({candidates[^1].Where}), which would leave {span - candidates.Count:N0} gaps",
                NamingRemedy));
    }

    private static void Identify(List<Candidate> candidates, long maxPixels, List<InputProblemException> problems, List<string> warnings)
    {
        foreach (var c in candidates.Where(c => c.Display is not null))
        {
            try
            {
                c.Listed = FileStamp.Of(c.Display!); // before its header is read: a change after this is a change after listing
                var facts = SectionImageReader.Identify(c.Display!);
                SectionImageReader.CheckSize(c.Display!, facts, maxPixels);
                c.Facts = facts;
            }
            catch (InputProblemException e) when (c.Status == SectionStatus.Excluded)
            {
                warnings.Add(InputProblemException.Format(e.File, $"{e.Problem} (the section is excluded, so the run goes on)", ""));
            }
            catch (InputProblemException e)
            {
                problems.Add(e);
            }
        }
    }

    private static void CheckBitDepths(List<Candidate> candidates, string where, List<InputProblemException> problems)
    {
        var depths = candidates
            .Where(c => c.Status == SectionStatus.Present && c.Facts is not null)
            .GroupBy(c => c.Facts!.BitsPerChannel)
            .OrderBy(g => g.Key)
            .ToList();
        if (depths.Count < 2) return;
        var parts = depths.Select(g =>
        {
            var names = g.Select(c => Path.GetFileName(c.Display!)).ToList();
            var shown = string.Join(", ", names.Take(3));
            return $"{g.Key}-bit ({shown}{(names.Count > 3 ? $" and {names.Count - 3} more" : "")})";
        });
        problems.Add(new InputProblemException(where, $"the sections mix bit depths: {string.Join(" and ", parts)}",
            "convert all section images to one bit depth (for example all 16-bit) and run again"));
    }

    private static double? Spacing(List<Candidate> candidates, SeriesManifest? manifest, SeriesOptions options, string where,
        string manifestName, List<InputProblemException> problems, List<string> warnings)
    {
        var positioned = candidates.Where(c => c.Row?.PositionUm is not null).ToList();
        if (positioned.Count > 0)
        {
            foreach (var c in candidates.Where(c => c.Display is not null && c.Row!.PositionUm is null))
                problems.Add(new InputProblemException(c.Where, "has no position_um, though other rows give one",
                    "give position_um on every row that names a file, or on none"));
            for (int i = 1; i < positioned.Count; i++)
            {
                double before = positioned[i - 1].Row!.PositionUm!.Value, here = positioned[i].Row!.PositionUm!.Value;
                if (here <= before)
                    problems.Add(new InputProblemException(positioned[i].Where,
                        $"position_um {SeriesManifest.Number(here)} does not increase from {SeriesManifest.Number(before)} at section {positioned[i - 1].Number}",
                        "positions must increase with the section number; check the value"));
            }
        }
        if (options.SpacingUm is { } given)
        {
            if (manifest?.SpacingUm is { } written && written != given)
                warnings.Add(InputProblemException.Format(manifest.Display,
                    $"spacing_um {SeriesManifest.Number(written)} is overridden by --spacing {SeriesManifest.Number(given)}", ""));
            return given;
        }
        if (manifest?.SpacingUm is { } set) return set;
        if (positioned.Count >= 2)
        {
            var steps = new List<double>();
            for (int i = 1; i < positioned.Count; i++)
                steps.Add((positioned[i].Row!.PositionUm!.Value - positioned[i - 1].Row!.PositionUm!.Value) / (positioned[i].Number - positioned[i - 1].Number));
            return Quantiles.Median(steps);
        }
        if (manifest?.RefusedSettings.Contains("spacing_um") == true) return null; // its setting line was refused already
        problems.Add(new InputProblemException(where, "the section spacing is unknown",
            $"give it with --spacing (micrometres between consecutive section numbers, for example --spacing 50) or a line '#! spacing_um = 50' in {manifestName}"));
        return null;
    }

    /// <summary>Pixel size per section number (files only): the option, else the row's column, else the manifest setting.</summary>
    private static Dictionary<int, double> PixelSizes(List<Candidate> candidates, SeriesManifest? manifest, SeriesOptions options, string where,
        string manifestName, List<InputProblemException> problems, List<string> warnings)
    {
        var sizes = new Dictionary<int, double>();
        if (options.PixelSizeUm is { } given && manifest is not null &&
            (manifest.PixelSizeUm is { } s && s != given || manifest.Rows.Any(r => r.PixelSizeUm is { } v && v != given)))
            warnings.Add(InputProblemException.Format(manifest.Display,
                $"the manifest's pixel sizes are overridden by --pixel-size {SeriesManifest.Number(given)}", ""));
        bool unknown = false;
        foreach (var c in candidates)
        {
            if ((options.PixelSizeUm ?? c.Row?.PixelSizeUm ?? manifest?.PixelSizeUm) is { } size) sizes[c.Number] = size;
            else if (c.Display is not null) unknown = true;
        }
        if (unknown && manifest?.RefusedSettings.Contains("pixel_size_um") != true) // a refused setting line was reported already
            problems.Add(new InputProblemException(where, "the pixel size is unknown",
                $"give it with --pixel-size (micrometres per image pixel, for example --pixel-size 4.0) or a line '#! pixel_size_um = 4.0' in {manifestName}"));
        return sizes;
    }

    private static List<SectionEntry> Entries(List<Candidate> candidates, double spacing, Dictionary<int, double> pixelSizes,
        double? seriesPixelSize, out double finest)
    {
        var byNumber = candidates.ToDictionary(c => c.Number);
        var used = candidates.Where(c => c.Status == SectionStatus.Present && pixelSizes.ContainsKey(c.Number)).ToList();
        finest = used.Count > 0 ? used.Min(c => pixelSizes[c.Number]) : pixelSizes.Values.Min();
        double gapPixel = seriesPixelSize ?? finest;

        // Known positions from the manifest; without any, position = (number − first) × spacing.
        var known = candidates.Where(c => c.Row?.PositionUm is not null).Select(c => (c.Number, Position: c.Row!.PositionUm!.Value)).ToList();
        int first = candidates[0].Number, last = candidates[^1].Number;
        var entries = new List<SectionEntry>(last - first + 1);
        int upper = 0; // first known position at or beyond n
        for (int n = first; n <= last; n++)
        {
            while (upper < known.Count && known[upper].Number < n) upper++;
            double position = known.Count == 0 ? (n - first) * spacing : Interpolate(known, upper, n, spacing);
            double pixel = pixelSizes.TryGetValue(n, out double p) ? p : gapPixel;
            if (byNumber.TryGetValue(n, out var c))
            {
                var row = c.Row;
                entries.Add(new SectionEntry(n, c.Display is null ? null : Path.GetFullPath(c.Display), position, pixel, c.Status,
                    row?.Mirrored, row?.Damaged ?? false, row?.Note ?? "", c.Facts) { Listed = c.Listed });
            }
            else
            {
                entries.Add(new SectionEntry(n, null, position, pixel, SectionStatus.Gap, null, false, "", null));
            }
        }
        return entries;
    }

    /// <summary>
    /// Linear in section number between the nearest known positions; beyond the ends, steps of the spacing.
    /// <paramref name="upper"/> is the index of the first known position at or beyond <paramref name="n"/>.
    /// </summary>
    private static double Interpolate(List<(int Number, double Position)> known, int upper, int n, double spacing)
    {
        if (upper < known.Count && known[upper].Number == n) return known[upper].Position;
        if (upper == known.Count) return known[^1].Position + (n - known[^1].Number) * spacing;
        if (upper == 0) return known[0].Position - (known[0].Number - n) * spacing;
        var (n0, p0) = known[upper - 1];
        var (n1, p1) = known[upper];
        return p0 + (p1 - p0) * (n - n0) / (n1 - n0);
    }
}
