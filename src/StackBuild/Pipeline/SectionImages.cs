using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Series;

namespace StackBuild.Pipeline;

/// <summary>
/// Where a build gets a section's pixels: the one edge between the stages and the images. The stages ask for a
/// section at a reduced size and never open a file themselves, so a build runs the same on files and on images
/// already in memory, and anything that renders other images through stored placements can use it too.
/// </summary>
public interface ISectionImages
{
    /// <summary>
    /// The section's image, gray in [0, 1], block-reduced by a whole factor so its long side is at most
    /// <see cref="ImageReadOptions.MaxLongSide"/> (not reduced when that is null); the factor is returned with it.
    /// </summary>
    LoadedSection Read(SectionEntry section, ImageReadOptions options);
}

/// <summary>
/// Section images read from the series' files, each time they are asked for (nothing is kept). A file that is gone or
/// not as it was when the series was listed (<see cref="SectionEntry.Listed"/>) is refused as such, in one line.
/// </summary>
public sealed class SectionFiles : ISectionImages
{
    public static readonly SectionFiles Instance = new();

    public LoadedSection Read(SectionEntry section, ImageReadOptions options)
    {
        var path = section.FilePath ?? throw new ArgumentException($"section {section.Number} has no file", nameof(section));
        section.Listed?.CheckUnchanged(path, "the series was listed");
        return SectionImageReader.ReadSection(path, options);
    }
}

/// <summary>
/// Section images already in memory, full resolution, gray in [0, 1] (as <see cref="SectionImageReader.ReadGray"/>
/// gives them), by section number. They are reduced exactly as a file of the same pixels would be.
/// </summary>
public sealed class SectionsInMemory(IReadOnlyDictionary<int, GrayImage> images) : ISectionImages
{
    public LoadedSection Read(SectionEntry section, ImageReadOptions options)
    {
        if (!images.TryGetValue(section.Number, out var image))
            throw new InputProblemException(section.FilePath ?? $"section {section.Number}", "no image in memory for this section",
                "give an image for every present section of the series");
        int longSide = Math.Max(image.Width, image.Height);
        int factor = options.MaxLongSide is int maxSide ? Math.Max(1, (longSide + maxSide - 1) / maxSide) : 1;
        var sink = new BoxDownsampler(image.Width, image.Height, factor, options.Reuse);
        for (int y = 0; y < image.Height; y++) sink.Accept(image.Row(y));
        return new LoadedSection(sink.Finish(), factor);
    }
}
