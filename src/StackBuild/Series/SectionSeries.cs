using StackBuild.IO;
using StackBuild.Imaging;

namespace StackBuild.Series;

/// <summary>
/// What the user says about a series beyond the files. Values given here win over the manifest's.
/// </summary>
public sealed record SeriesOptions
{
    /// <summary>A manifest to use instead of <c>manifest.csv</c> in the series folder.</summary>
    public string? ManifestPath { get; init; }

    /// <summary>Size of one image pixel in micrometres, for every section (overrides the manifest).</summary>
    public double? PixelSizeUm { get; init; }

    /// <summary>Distance between consecutive section numbers in micrometres (overrides the manifest).</summary>
    public double? SpacingUm { get; init; }

    /// <summary>Images whose header declares more pixels than this are refused before any is decoded.</summary>
    public long MaxPixels { get; init; } = 2_000_000_000;
}

public enum SectionStatus
{
    /// <summary>An image to use.</summary>
    Present,

    /// <summary>No image: a number missing from the files, or a manifest row with an empty file (a lost section).</summary>
    Gap,

    /// <summary>The manifest excludes it; the file is kept on record but not loaded.</summary>
    Excluded,
}

/// <summary>
/// One section number of the series. <see cref="PositionUm"/> is the cutting position along the series axis in
/// micrometres (the first section number at 0 unless the manifest gives positions). <see cref="FilePath"/> is
/// an absolute path, null for a gap. <see cref="MountedMirrored"/> is null when unknown. <see cref="Image"/> is
/// the header of the file (null for gaps, and for excluded files that could not be identified).
/// </summary>
public sealed record SectionEntry(
    int Number,
    string? FilePath,
    double PositionUm,
    double PixelSizeUm,
    SectionStatus Status,
    bool? MountedMirrored,
    bool Damaged,
    string Note,
    ImageFacts? Image)
{
    /// <summary>The file's length and last write time when the series was listed (null for gaps and unread files).</summary>
    public FileStamp? Listed { get; init; }
}

/// <summary>
/// A found, identified and ordered series: one entry per section number from the first to the last, in
/// increasing order, gaps explicit. <see cref="PixelSizeUm"/> is the finest (smallest) pixel size of the
/// sections in use; <see cref="SpacingUm"/> the distance per section number. <see cref="Warnings"/> are
/// one-line notes that did not stop the series from opening (for example files the manifest does not name).
/// </summary>
public sealed record SectionSeries(
    string Folder,
    string? ManifestPath,
    IReadOnlyList<SectionEntry> Sections,
    double SpacingUm,
    double PixelSizeUm,
    IReadOnlyList<string> Warnings)
{
    public IEnumerable<SectionEntry> Present => Sections.Where(s => s.Status == SectionStatus.Present);
}

/// <summary>Section numbers written for people.</summary>
public static class SectionNumbers
{
    /// <summary>Section numbers in order as runs: "1–3, 5, 7–60".</summary>
    public static string Runs(IEnumerable<int> numbers)
    {
        var sorted = numbers.Order().ToList();
        var parts = new List<string>();
        for (int i = 0; i < sorted.Count; i++)
        {
            int j = i;
            while (j + 1 < sorted.Count && sorted[j + 1] == sorted[j] + 1) j++;
            parts.Add(j == i ? $"{sorted[i]}" : $"{sorted[i]}–{sorted[j]}");
            i = j;
        }
        return string.Join(", ", parts);
    }
}
