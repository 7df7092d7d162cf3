using StackBuild.Pipeline;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Reslice;

namespace StackBuild.Viewer;

/// <summary>
/// Another volume shown over the main one: a second channel, a template, a label volume. It may have any grid; it is
/// sampled at the world positions (RAS+ mm) of the main volume's plane pixels, through its own affine.
/// </summary>
/// <param name="Volume">The volume with its own affine.</param>
/// <param name="Name">Shown on the page (a file name, not a path).</param>
/// <param name="Labels">True for a label volume (whole numbers naming regions): sampled at the nearest voxel and shown
/// as flat colours or outlines; false for intensities (sampled trilinearly, shown in one colour).</param>
public sealed record ViewerOverlay(Volume Volume, string Name, bool Labels)
{
    /// <summary>Most distinct values a volume may hold to be taken for labels when its header does not say.</summary>
    public const int MaxGuessedLabels = 64;

    /// <summary>
    /// Whether a volume should be shown as labels when the user did not say: its header's intent is NIFTI_INTENT_LABEL
    /// (1002, nifti1.h), or it is stored as integers and holds at most <see cref="MaxGuessedLabels"/> distinct values
    /// (a scanned or rendered image has many more grey levels than that).
    /// </summary>
    public static bool LooksLikeLabels(Volume volume, bool integerStorage, short intentCode)
    {
        if (intentCode == 1002) return true;
        if (!integerStorage) return false;
        var seen = new HashSet<float>();
        foreach (float v in volume.Voxels)
            if (seen.Add(v) && seen.Count > MaxGuessedLabels) return false;
        return true;
    }
}

/// <summary>A section of the series at a plane of the volume, from the build's sidecar.</summary>
/// <param name="PlaneIndex">The plane k (voxel index along the stack).</param>
/// <param name="Number">The section number.</param>
/// <param name="Status">aligned, placed, gap, excluded or failed, with ", filled" when the plane was interpolated.</param>
public sealed record ViewerSection(int PlaneIndex, int Number, string Status)
{
    /// <summary>
    /// The series' sections by plane, from the build's sidecar beside the volume (OUT.json for OUT.nii.gz) when there is
    /// one that describes this volume's grid; otherwise null (the page then shows plane indices only).
    /// </summary>
    public static IReadOnlyList<ViewerSection>? FromSidecar(string volumePath, Volume volume, TextWriter notes)
    {
        string sidecar;
        try { sidecar = StackBuild.Write.BuildOutputPaths.For(volumePath).Sidecar; }
        catch (InputProblemException) { return null; }
        if (!File.Exists(sidecar)) return null;
        StackBuild.Pipeline.BuildRecord? record;
        try { record = System.Text.Json.JsonSerializer.Deserialize<StackBuild.Pipeline.BuildRecord>(File.ReadAllText(sidecar)); }
        catch (Exception e) when (e is System.Text.Json.JsonException or IOException or UnauthorizedAccessException)
        {
            notes.WriteLine($"note: {sidecar}: not read as this volume's sidecar ({e.Message.Split('\n')[0]}); section numbers are not shown");
            return null;
        }
        if (record is null || !record.Dimensions.SequenceEqual(new[] { volume.Nx, volume.Ny, volume.Nz }))
        {
            notes.WriteLine($"note: {sidecar} describes another grid than {volumePath}; section numbers are not shown");
            return null;
        }
        var planes = new List<ViewerSection>();
        foreach (var s in record.Sections)
        {
            // With --voxel-size a section lies at a fractional plane; only a plane that is the section itself is named by it.
            double z = s.VolumeZ ?? s.ZIndex;
            int k = (int)Math.Round(z);
            if (Math.Abs(z - k) > 0.01 || k < 0 || k >= volume.Nz) continue;
            planes.Add(new ViewerSection(k, s.Number, s.Filled is null ? s.Status.Word() : $"{s.Status.Word()}, filled"));
        }
        return planes;
    }
}

/// <summary>What a viewer shows besides its main volume.</summary>
public sealed record ViewerOptions
{
    public IReadOnlyList<ViewerOverlay> Overlays { get; init; } = [];
    /// <summary>The series' sections by plane, when the volume came with its sidecar; null otherwise.</summary>
    public IReadOnlyList<ViewerSection>? Sections { get; init; }
}

/// <summary>An overlay prepared once: the compact copy for reslicing, its default window and, for labels, its values.</summary>
internal sealed class ViewerLayer
{
    public ViewerOverlay Overlay { get; }
    public ResliceSource Source { get; }
    public IntensityWindow DefaultWindow { get; }
    public float Min { get; }
    public float Max { get; }
    /// <summary>The distinct non-zero label values (at most 1000 listed), for labels.</summary>
    public IReadOnlyList<double> LabelValues { get; }

    public ViewerLayer(ViewerOverlay overlay)
    {
        Overlay = overlay;
        var volume = overlay.Volume;
        Source = ResliceSource.Compact(volume);
        DefaultWindow = IntensityWindow.Robust(volume);
        float min = float.PositiveInfinity, max = float.NegativeInfinity;
        var labels = new SortedSet<double>();
        foreach (float v in volume.Voxels)
        {
            if (!float.IsFinite(v)) continue;
            if (v < min) min = v;
            if (v > max) max = v;
            if (overlay.Labels && v != 0 && labels.Count < 1000) labels.Add(v);
        }
        Min = float.IsFinite(min) ? min : 0;
        Max = float.IsFinite(max) ? max : 1;
        LabelValues = labels.ToArray();
    }

    public object Describe(int index)
    {
        var a = Overlay.Volume.Affine;
        var (si, sj, sk) = a.VoxelSizes;
        return new
        {
            Index = index,
            Overlay.Name,
            Overlay.Labels,
            Dims = new[] { Overlay.Volume.Nx, Overlay.Volume.Ny, Overlay.Volume.Nz },
            VoxelSizeMm = new[] { si, sj, sk },
            AxisCodes = a.AxisCodes.Code,
            Affine = a.ToRows(),
            Window = new { DefaultWindow.Low, DefaultWindow.High },
            ValueRange = new { Min = (double)Min, Max = (double)Max },
            LabelValues,
        };
    }

    /// <summary>The voxel value nearest to world point <paramref name="mm"/>, its voxel indices, and whether it lies inside the grid.</summary>
    public static (double? Value, double[] Voxel) Probe(Volume volume, Vector3D mm)
    {
        Vector3D v = volume.Affine.Inverse().Apply(mm.X, mm.Y, mm.Z);
        int i = (int)Math.Floor(v.X + 0.5), j = (int)Math.Floor(v.Y + 0.5), k = (int)Math.Floor(v.Z + 0.5);
        bool inside = i >= 0 && j >= 0 && k >= 0 && i < volume.Nx && j < volume.Ny && k < volume.Nz;
        return (inside ? volume[i, j, k] : null, v.ToArray());
    }
}
