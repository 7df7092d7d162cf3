using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Demo;

/// <summary>What the synthetic demo specimen looks like and how it is cut.</summary>
public sealed record DemoOptions
{
    public const int MinSections = 3, MaxSections = 2000;
    public const int MinSize = 32, MaxSize = 8192;

    /// <summary>Largest truth volume (voxels) the demo will build: about 1 GB of float32, and as much again for the scans.</summary>
    public const long MaxVoxels = 1L << 28;

    public int Seed { get; init; } = 7;

    /// <summary>Number of sections cut from the block (numbers 1…Sections).</summary>
    public int Sections { get; init; } = 60;

    /// <summary>Long side of the canvas in pixels (width); the height is 4/5 of it.</summary>
    public int Size { get; init; } = 256;

    public double PixelSizeUm { get; init; } = 20;

    /// <summary>Distance between successive sections (section thickness when none are skipped).</summary>
    public double SpacingUm { get; init; } = 50;

    public int Width => Size;

    public int Height => Math.Max(1, (int)Math.Round(Size * 0.8));

    /// <summary>Throws <see cref="ArgumentOutOfRangeException"/> when the options are outside what the demo supports.</summary>
    public void Validate()
    {
        if (Sections is < MinSections or > MaxSections)
            throw new ArgumentOutOfRangeException(nameof(Sections), Sections, $"The demo needs {MinSections} to {MaxSections} sections.");
        if (Size is < MinSize or > MaxSize)
            throw new ArgumentOutOfRangeException(nameof(Size), Size, $"The demo canvas must be {MinSize} to {MaxSize} pixels wide.");
        if ((long)Width * Height * Sections > MaxVoxels)
            throw new ArgumentOutOfRangeException(nameof(Size), Size, $"{Width}×{Height}×{Sections} voxels is more than the demo builds ({MaxVoxels}).");
        if (!(PixelSizeUm > 0) || !double.IsFinite(PixelSizeUm))
            throw new ArgumentOutOfRangeException(nameof(PixelSizeUm), PixelSizeUm, "The pixel size must be a positive number of micrometres.");
        if (!(SpacingUm > 0) || !double.IsFinite(SpacingUm))
            throw new ArgumentOutOfRangeException(nameof(SpacingUm), SpacingUm, "The section spacing must be a positive number of micrometres.");
    }
}

/// <summary>
/// One section of the demo series as it was cut and mounted.
/// </summary>
/// <param name="Number">Section number, 1-based; section n is plane k = n − 1 of the truth volume.</param>
/// <param name="FileName">Image file name in the series folder, or null when the section was lost.</param>
/// <param name="Lost">Lost during cutting: no image.</param>
/// <param name="Mirrored">Mounted face down, so the image shows the section mirrored.</param>
/// <param name="Torn">A crack with a displaced flap and a missing piece; <paramref name="PlaneToImage"/> describes the main part.</param>
/// <param name="Excluded">Folded and with a bubble; marked exclude=yes in the manifest.</param>
/// <param name="PlaneToImage">
/// Maps truth-plane pixel coordinates to scanned-image pixel coordinates, both in StackBuild's pixel convention
/// (x right, y down, (0, 0) at the centre of the top-left pixel). The scan was made by sampling
/// <c>image(p) = truth(PlaneToImage⁻¹ · p)</c> (bilinear), so applying <c>PlaneToImage.Inverse()</c> to an image
/// pixel gives where it came from in truth plane <c>Number − 1</c>. It is rigid: a rotation and shift about the
/// canvas centre, with a mirror about the vertical centre line first when <paramref name="Mirrored"/>.
/// For a lost section it is the identity.
/// </param>
/// <param name="Gain">Stain darkening, as a fraction of full scale per unit of truth density.</param>
/// <param name="Offset">Brightness of bare slide, as a fraction of full scale.</param>
/// <remarks>
/// The noise-free 8-bit value at image pixel p is <c>255 · (Offset − Gain · truth(PlaneToImage⁻¹ · p))</c>;
/// the written image adds Gaussian noise of <see cref="DemoSpecimenMaker.ScanNoiseGrayLevels"/> gray levels and
/// rounds to 0–255 (brightfield: bare slide is bright, stained tissue absorbs light and is darker).
/// </remarks>
public sealed record DemoSection(int Number, string? FileName, bool Lost, bool Mirrored, bool Torn, bool Excluded,
    Transform2D PlaneToImage, double Gain, double Offset);

/// <summary>
/// The synthetic demo specimen: the truth volume, how each section was cut and mounted, and the scans.
/// </summary>
/// <param name="Truth">
/// Stain density in [0, 1] (0 = no tissue), float32, Width × Height × Sections, axis codes RIP, voxel size
/// pixel size × pixel size × spacing, centred on the world origin.
/// </param>
/// <param name="Images">The scanned images exactly as written (8-bit values 0–255 held as floats); null where a section was lost.</param>
public sealed record DemoSpecimen(DemoOptions Options, Volume Truth, IReadOnlyList<DemoSection> Sections, IReadOnlyList<GrayImage?> Images);
