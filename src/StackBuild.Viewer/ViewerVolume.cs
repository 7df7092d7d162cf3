using StackBuild.Imaging;
using StackBuild.Reslice;

namespace StackBuild.Viewer;

/// <summary>The one volume a viewer shows, prepared once: the compact copy for reslicing and the default window.</summary>
internal sealed class ViewerVolume
{
    public Volume Volume { get; }
    public string Name { get; }
    public ResliceSource Source { get; }
    public IntensityWindow DefaultWindow { get; }
    public float Min { get; }
    public float Max { get; }

    public IReadOnlyList<ViewerLayer> Layers { get; }
    public IReadOnlyList<ViewerSection>? Sections { get; }

    public ViewerVolume(Volume volume, string name, ViewerOptions? options = null)
    {
        Volume = volume;
        Name = name;
        Layers = (options?.Overlays ?? []).Select(o => new ViewerLayer(o)).ToArray();
        Sections = options?.Sections;
        Source = ResliceSource.Compact(volume);
        DefaultWindow = IntensityWindow.Robust(volume);
        float min = float.PositiveInfinity, max = float.NegativeInfinity;
        foreach (float v in volume.Voxels)
        {
            if (!float.IsFinite(v)) continue;
            if (v < min) min = v;
            if (v > max) max = v;
        }
        Min = float.IsFinite(min) ? min : 0;
        Max = float.IsFinite(max) ? max : 1;
    }

    /// <summary>What the page needs to set up its controls, as JSON-ready values.</summary>
    public object Describe()
    {
        var a = Volume.Affine;
        var (si, sj, sk) = a.VoxelSizes;
        double diagonal = 0;
        var corners = PlaneSpec.BoxCorners(Volume).ToArray();
        foreach (var p in corners) foreach (var q in corners) diagonal = Math.Max(diagonal, (p - q).Length);
        return new
        {
            Name,
            Dims = new[] { Volume.Nx, Volume.Ny, Volume.Nz },
            VoxelSizeMm = new[] { si, sj, sk },
            AxisCodes = a.AxisCodes.Code,
            Affine = a.ToRows(),
            Window = new { DefaultWindow.Low, DefaultWindow.High },
            ValueRange = new { Min = (double)Min, Max = (double)Max },
            DiagonalMm = diagonal,
            PixelSizeMm = PlaneSpec.SmallestVoxelSize(a),
            MaxTiltDeg = PlaneSpec.MaxTiltDeg,
            Orientations = new[] { "section", "ik", "jk", "axial", "coronal", "sagittal" },
            // Where each untilted voxel-axis plane lies at depth 0 and which way depth runs, so the page can put a
            // plane through any voxel: depth = (voxel's world position − centre) · depth direction.
            AxisPlanes = new[] { "section", "ik", "jk" }.Select(n =>
            {
                var spec = new PlaneSpec(PlaneOrientation.Parse(n));
                return new { Plane = n, CentreMm = spec.CentrePoint(Volume).ToArray(), DepthDirection = spec.Axes(a).Depth.ToArray() };
            }).ToArray(),
            Overlays = Layers.Select((l, n) => l.Describe(n)).ToArray(),
            Sections = Sections?.Select(s => new { k = s.PlaneIndex, s.Number, s.Status }).ToArray(),
        };
    }
}
