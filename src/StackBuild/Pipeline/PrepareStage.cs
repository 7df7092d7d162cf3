using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Register;
using StackBuild.Series;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>A present section at the common registration pixel size, with its prepared registration image (null when not aligning).</summary>
/// <param name="FullToWork">Full-resolution input pixels → this section's working pixels.</param>
public sealed record WorkingSection(SectionEntry Entry, Transform2D FullToWork, GrayImage Image, PreparedSection? Prepared);

/// <summary>Stage 2, the prepared sections: every present section at one pixel size (<see cref="WorkPixelUm"/>), in series order.</summary>
public sealed record PreparedSections(IReadOnlyList<WorkingSection> Sections, double WorkPixelUm)
{
    public int Count => Sections.Count;
    public WorkingSection this[int n] => Sections[n];
}

public static class PrepareStage
{
    /// <summary>Smallest registration image side, in pixels, that registration can work with.</summary>
    public const int MinRegistrationSide = 16;

    /// <summary>
    /// Registration images: every section at one common pixel size, about the work size on the long side, and (when
    /// aligning) prepared for registration. Reads each present section once through <paramref name="images"/>.
    /// </summary>
    public static PreparedSections Prepare(SeriesPlan plan, ISectionImages images, IProgress<string>? progress)
    {
        var present = plan.Present;
        var options = plan.Options;
        int workSize = Math.Max(MinRegistrationSide, options.Registration.WorkSize);
        double target = plan.LargestUm / workSize;
        // Every section is brought to one pixel size so pairwise maps stay rigid; that size is the coarsest the
        // block reduction gives, never coarser than needed for the work size.
        var loaded = new (SectionEntry Entry, LoadedSection Section)[present.Count];
        int done = 0;
        Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            var s = present[n];
            int factor = Math.Max(1, (int)Math.Floor(target / s.PixelSizeUm));
            int side = Math.Max(1, (int)Math.Ceiling(Math.Max(s.Image!.Width, s.Image!.Height) / (double)factor));
            loaded[n] = (s, images.Read(s, new ImageReadOptions { Channel = options.Channel, MaxLongSide = side }));
            progress?.Report($"loading: {Interlocked.Increment(ref done)}/{present.Count} sections");
        });
        double common = loaded.Max(l => l.Entry.PixelSizeUm * l.Section.Downsample);
        // Registration canvases for the sections being registered on every thread and the few before each: pairs reach
        // MirrorParity.MaxReach sections back and are handed out in series order.
        var canvases = new CanvasCache((MirrorParity.MaxReach + 2) * Math.Max(2, Environment.ProcessorCount));
        var result = new WorkingSection[present.Count];
        Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            var (entry, section) = loaded[n];
            var fullToLoaded = Resampler.FullToBlockReduced((int)section.Downsample);
            double loadedUm = entry.PixelSizeUm * section.Downsample;
            GrayImage image = section.Image;
            var fullToWork = fullToLoaded;
            if (Math.Abs(loadedUm - common) > 1e-9 * common)
            {
                double s = loadedUm / common;
                var loadedToWork = Resampler.EdgeAlignedScale(s);
                int w = Math.Max(1, (int)Math.Round(image.Width * s)), h = Math.Max(1, (int)Math.Round(image.Height * s));
                image = Resampler.Warp(image, loadedToWork.Inverse(), w, h, image.BorderMedian());
                fullToWork = fullToLoaded.Then(loadedToWork);
            }
            if (options.Align && Math.Max(image.Width, image.Height) < MinRegistrationSide)
                throw new InputProblemException(entry.FilePath,
                    $"is only {image.Width}×{image.Height} pixels at the registration pixel size ({common:0.###} µm), too small to register",
                    "check this section's pixel size against the others, or leave it out with exclude=yes in the manifest");
            var prepared = options.Align ? SectionRegistration.PrepareUnreduced(image, options.Registration, canvases) : null;
            result[n] = new WorkingSection(entry, fullToWork, image, prepared);
        });
        return new PreparedSections(result, common);
    }
}
