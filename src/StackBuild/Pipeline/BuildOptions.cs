using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Render;
using StackBuild.Series;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>Options of one build, passed down explicitly.</summary>
public sealed record BuildOptions
{
    public required string Input { get; init; }
    public SeriesOptions Series { get; init; } = new();
    public AxisCodes Axes { get; init; } = AxisCodes.Default;
    /// <summary>In-plane voxel size of the output in µm; null = the series' pixel size, coarsened to fit <see cref="MaxPlaneSide"/>.</summary>
    public double? OutputPixelSizeUm { get; init; }
    /// <summary>Plane spacing of the output in µm (also the in-plane voxel size when <see cref="OutputPixelSizeUm"/> is not given); null = the section spacing.</summary>
    public double? VoxelSizeUm { get; init; }
    /// <summary>Largest side of an output plane, in voxels, when the voxel size is chosen automatically.</summary>
    public int MaxPlaneSide { get; init; } = 2048;
    public Interpolation Interpolation { get; init; } = Interpolation.Bilinear;
    public GrayChannel Channel { get; init; } = GrayChannel.Luminance;
    /// <summary>False: place the sections centred and unaligned (the series as scanned).</summary>
    public bool Align { get; init; } = true;
    public RegistrationOptions Registration { get; init; } = new();
    public ChainOptions Chain { get; init; } = new();
    /// <summary>The plain neighbour chain (the default), or the chain followed by the global solve (<see cref="Smoothing"/>).</summary>
    public PlacementSolver Solver { get; init; } = PlacementSolver.Chain;
    /// <summary>The reference-free smoothing prior on top of the chain (<see cref="SmoothingSolver"/>), used when <see cref="Solver"/> is <see cref="PlacementSolver.Smoothing"/>.</summary>
    public SmoothingOptions Smoothing { get; init; } = new();
    /// <summary>How gap, excluded and failed planes are filled from their nearest placed neighbours.</summary>
    public GapFill Fill { get; init; } = GapFill.Flow;
    /// <summary>Which way the output faces and how far its grid reaches (<see cref="FrameOptions"/>).</summary>
    public FrameOptions Frame { get; init; } = new();
    /// <summary>A template volume that guides the drift and gives the output its frame; null = none.</summary>
    public TemplateOptions? Template { get; init; }
}

/// <summary>How the series lies in a template volume (blockface stack, MRI of the specimen).</summary>
public sealed record TemplateOptions
{
    public required string Path { get; init; }
    /// <summary>The template's voxel axis along which the sections were cut: 'i', 'j' or 'k'.</summary>
    public char CutAxis { get; init; } = 'k';
    /// <summary>Template plane index (fractional) of the first section; null = the series centred on the template along the cut axis.</summary>
    public double? FirstPlane { get; init; }
    /// <summary>True when higher section numbers lie at lower template plane indices.</summary>
    public bool Reverse { get; init; }
    /// <summary>True: the output takes the template's voxel size (in the plane, and as plane spacing); false: the sections' own.</summary>
    public bool TemplateGrid { get; init; }
}

/// <summary>A built volume (intensities in the input's own units: 0–255 for 8-bit, 0–65535 for 16-bit) and its record.</summary>
public sealed record BuildResult(Volume Volume, BuildRecord Record, int InputBitDepth);
