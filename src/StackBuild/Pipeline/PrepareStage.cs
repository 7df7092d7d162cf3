using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Register;
using StackBuild.Series;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>A present section at the common registration pixel size, with its prepared registration image (null when not aligning).</summary>
/// <param name="FullToWork">Full-resolution input pixels → this section's working pixels.</param>
/// <param name="Held">The working image, held by the build's <see cref="ImageSpill"/> (on disk, for a long series).</param>
public sealed record WorkingSection(SectionEntry Entry, Transform2D FullToWork, HeldImage Held, PreparedSection? Prepared)
{
    /// <summary>The working image, read back when it is not in memory (shared: do not change it; keep it only while using it).</summary>
    public GrayImage Image => Held.Load();
    /// <summary>Width of <see cref="Image"/>.</summary>
    public int Width => Held.Width;
    /// <summary>Height of <see cref="Image"/>.</summary>
    public int Height => Held.Height;

    /// <summary>The pixel size of <see cref="Image"/> in µm (the common registration pixel once preparation is done).</summary>
    public double PixelUm { get; init; }
}

/// <summary>
/// Stage 2, the prepared sections: every present section at one pixel size (<see cref="WorkPixelUm"/>), in series order.
/// Their working images are held by <see cref="Spill"/>, which disposing this closes (the build does, once its record is
/// made); sections asked for their images after that fail.
/// </summary>
public sealed record PreparedSections(IReadOnlyList<WorkingSection> Sections, double WorkPixelUm) : IDisposable
{
    public int Count => Sections.Count;
    public WorkingSection this[int n] => Sections[n];
    /// <summary>Where the working images are kept (in memory when none was given).</summary>
    public ImageSpill Spill { get; init; } = ImageSpill.InMemory();
    public void Dispose() => Spill.Dispose();
}

public static class PrepareStage
{
    /// <summary>Smallest registration image side, in pixels, that registration can work with.</summary>
    public const int MinRegistrationSide = 16;

    /// <summary>
    /// Registration images: every section at one common pixel size, about the work size on the long side, and (when
    /// aligning) prepared for registration. Reads each present section once through <paramref name="images"/>.
    /// </summary>
    /// <remarks>
    /// The working images go to a scratch file (<see cref="ImageSpill.Create"/>) unless <paramref name="spill"/> says where:
    /// a 1,000-section series at a 512-pixel work size has a gigabyte of them, and registration needs a few at a time.
    /// </remarks>
    public static PreparedSections Prepare(SeriesPlan plan, ISectionImages images, IProgress<string>? progress, ImageSpill? spill = null)
    {
        spill ??= ImageSpill.Create();
        var present = plan.Present;
        var options = plan.Options;
        int workSize = Math.Max(MinRegistrationSide, options.Registration.WorkSize);
        // Every section is brought to one pixel size so pairwise maps stay rigid: the work size's pixel (the largest
        // section's long side is the work size), or a coarser section's own. Each is read with the largest whole block
        // reduction that stays at or below that pixel and area-reduced to it at once, so only the sections being read are
        // held at the size they were read at (a 768-pixel series was once registered unreduced, at 2.25 times the pixels
        // the work size asks for, and every read image was held until all were read).
        double target = plan.LargestUm / workSize;
        // Registration canvases for the sections being registered on every thread and the few before each: pairs reach
        // MirrorParity.MaxReach sections back and are handed out in series order.
        var canvases = new CanvasCache((MirrorParity.MaxReach + 2) * Math.Max(2, Environment.ProcessorCount));
        var result = new WorkingSection[present.Count];
        int done = 0;
        Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            var s = present[n];
            int factor = Math.Max(1, (int)Math.Floor(target / s.PixelSizeUm));
            int side = Math.Max(1, (int)Math.Ceiling(Math.Max(s.Image!.Width, s.Image!.Height) / (double)factor));
            var section = images.Read(s, new ImageReadOptions { Channel = options.Channel, MaxLongSide = side });
            result[n] = Working(s, section.Image, Resampler.FullToBlockReduced((int)section.Downsample), s.PixelSizeUm * section.Downsample, target, options, canvases, spill);
            progress?.Report($"loading: {Interlocked.Increment(ref done)}/{present.Count} sections");
        });
        // A section read coarser than the work size's pixel (a lower-resolution scan among finer ones) sets the common size;
        // the others are reduced once more to it, from their working images.
        double common = Math.Max(target, result.Max(w => w.PixelUm));
        if (common > target * (1 + 1e-9))
            Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
            {
                var w = result[n];
                if (w.PixelUm < common * (1 - 1e-9)) result[n] = Working(w.Entry, w.Image, w.FullToWork, w.PixelUm, common, options, canvases, spill);
            });
        return new PreparedSections(result, common) { Spill = spill };
    }

    /// <summary>
    /// A section read at <paramref name="readUm"/> (<paramref name="fullToRead"/> from its full-resolution pixels) brought to
    /// <paramref name="commonUm"/> by area means (when finer) and prepared for registration; a small section keeps the image it
    /// was read at for registration with another small one (<see cref="SectionRegistration.WithFiner"/>).
    /// </summary>
    private static WorkingSection Working(SectionEntry entry, GrayImage read, Transform2D fullToRead, double readUm, double commonUm,
        BuildOptions options, CanvasCache canvases, ImageSpill spill)
    {
        var image = read;
        var fullToWork = fullToRead;
        if (readUm < commonUm * (1 - 1e-9))
        {
            // Area means, whose pixel footprints are the edge-aligned map's.
            double s = readUm / commonUm;
            var readToWork = Resampler.EdgeAlignedScale(s);
            int w = Math.Max(1, (int)Math.Round(read.Width * s)), h = Math.Max(1, (int)Math.Round(read.Height * s));
            image = ImageOps.Reduce(read, s, w, h);
            fullToWork = fullToRead.Then(readToWork);
        }
        if (options.Align && Math.Max(image.Width, image.Height) < MinRegistrationSide)
            throw new InputProblemException(entry.FilePath,
                $"is only {image.Width}×{image.Height} pixels at the registration pixel size ({commonUm:0.###} µm), too small to register",
                "check this section's pixel size against the others, or leave it out with exclude=yes in the manifest");
        var held = spill.Hold(image);
        var prepared = options.Align ? SectionRegistration.PrepareUnreduced(held, options.Registration, canvases) : null;
        if (prepared is not null && !ReferenceEquals(image, read))
            prepared = SectionRegistration.WithFiner(prepared, read, commonUm / readUm, options.Registration, canvases);
        return new WorkingSection(entry, fullToWork, held, prepared) { PixelUm = Math.Max(readUm, commonUm) };
    }
}
