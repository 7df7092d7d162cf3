using System.Text.Json.Serialization;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Series;

namespace StackBuild.Pipeline;

/// <summary>
/// What a part file of an applied volume holds (<c>apply --sections</c>): the planes of the sections in its range, drawn but
/// not yet gap-filled, resampled along the stack or rounded, so that parts rendered apart can be put together
/// (<c>stackbuild merge</c>) into the very volume one whole run gives.
/// </summary>
public sealed record ApplyPartRecord
{
    /// <summary>What the file is, in words.</summary>
    [JsonPropertyName("part")] public string Part { get; init; } = Words;
    /// <summary>The first and last section number of the range (inclusive).</summary>
    [JsonPropertyName("sections")] public int[] Sections { get; init; } = [];
    /// <summary>The sections drawn, in plane order of the part's volume: its plane n holds section drawn[n].</summary>
    [JsonPropertyName("drawn")] public List<int> Drawn { get; init; } = [];
    /// <summary>The options the part was rendered with; every part of one volume must have the same.</summary>
    [JsonPropertyName("options")] public ApplyPartOptions Options { get; init; } = new();

    public const string Words = "one part of an applied volume: float32 planes of the sections drawn in its range, in order, before gap " +
        "filling, resampling along the stack and rounding; not a volume to look at: put the parts together with 'stackbuild merge'";
}

/// <summary>The options of an <c>apply</c> run that decide its voxels, as given (null: not given).</summary>
public sealed record ApplyPartOptions
{
    [JsonPropertyName("images")] public string Images { get; init; } = "";
    [JsonPropertyName("manifest")] public string? Manifest { get; init; }
    [JsonPropertyName("pixel_size_um")] public double? PixelSizeUm { get; init; }
    [JsonPropertyName("output_pixel_size_um")] public double? OutputPixelSizeUm { get; init; }
    [JsonPropertyName("voxel_size_um")] public double? VoxelSizeUm { get; init; }
    [JsonPropertyName("channel")] public string Channel { get; init; } = "";
    /// <summary>The page drawn, from 0; null when the set was not split by pages.</summary>
    [JsonPropertyName("page_index")] public int? PageIndex { get; init; }
}

/// <summary>A part of an applied volume as read back: its sidecar's path and record, and a way to read its planes.</summary>
public sealed record ApplyPartFile(string SidecarPath, ApplyRecord Record, Func<Volume> ReadPlanes);

/// <summary>Rendering an applied volume in parts and putting the parts together.</summary>
public static class ApplyParts
{
    /// <summary>
    /// Refuses, in one line naming the part, parts whose placements or options differ from the first part's: they are not
    /// pieces of one volume.
    /// </summary>
    public static void CheckSameRun(IReadOnlyList<ApplyPartFile> parts)
    {
        var first = parts[0];
        foreach (var part in parts.Skip(1))
        {
            if (part.Record.PlacementsFrom != first.Record.PlacementsFrom)
                throw new InputProblemException(part.SidecarPath,
                    $"its placements come from {part.Record.PlacementsFrom}, those of {Path.GetFileName(first.SidecarPath)} from {first.Record.PlacementsFrom}",
                    "merge the parts of one apply run (the same build and options)");
            if (part.Record.Part!.Options != first.Record.Part!.Options)
                throw new InputProblemException(part.SidecarPath,
                    $"it was rendered with other apply options than {Path.GetFileName(first.SidecarPath)} (images, pixel sizes, channel or page)",
                    "render every part with the same options, then merge them");
        }
    }

    /// <summary>
    /// Draws the sections of <paramref name="plan"/> numbered <paramref name="first"/> to <paramref name="last"/> that have
    /// an image and a placement, each into its own plane, as the whole render draws them (<see cref="RenderStage.DrawFrom"/>);
    /// returns the planes in section order and the numbers drawn. Nothing is filled, resampled or rounded.
    /// </summary>
    public static (Volume Planes, List<int> Drawn) Render(ApplyPlan plan, ISectionImages images, int first, int last, IProgress<string>? progress)
    {
        var sections = plan.Sections.Where(s => s.Entry.Number >= first && s.Entry.Number <= last && s.ImageToPlane is not null
            && s.Status is SectionOutcome.Aligned or SectionOutcome.Placed).ToList();
        int nx = plan.Target.Nx, ny = plan.Target.Ny;
        var volume = new Volume(nx, ny, Math.Max(1, sections.Count), plan.Target.Affine);
        var draw = RenderStage.DrawFrom(images, plan.Settings, nx, ny);
        for (int n = 0; n < sections.Count; n++)
        {
            draw(sections[n], volume.Plane(n));
            progress?.Report($"rendering: section {sections[n].Entry.Number} ({n + 1}/{sections.Count})");
        }
        return (volume, sections.Select(s => s.Entry.Number).ToList());
    }

    /// <summary>
    /// The sidecar of a part: the whole run's record (<see cref="ApplyStage.Record"/>) with the sections of the range only,
    /// the part's own dimensions (one plane per section drawn) and the <see cref="ApplyPartRecord"/>.
    /// </summary>
    public static ApplyRecord PartRecord(ApplyPlan plan, int first, int last, List<int> drawn, ApplyPartOptions options, DateTime createdUtc)
    {
        var (planes, _, affine, _) = RenderStage.FinishedPlanes(plan.Target.Nx, plan.Target.Ny, plan.Planes, plan.Target.Affine, plan.Settings);
        var (record, _) = ApplyStage.Record(plan, plan.Sections, planes, affine, createdUtc);
        return record with
        {
            Dimensions = [plan.Target.Nx, plan.Target.Ny, Math.Max(1, drawn.Count)],
            Sections = record.Sections.Where(s => s.Number >= first && s.Number <= last).ToList(),
            Part = new ApplyPartRecord { Sections = [first, last], Drawn = drawn, Options = options },
        };
    }

    /// <summary>
    /// A part's sidecar as written by <c>apply --sections</c>, and its volume beside it (read when the merge needs it).
    /// Refuses, in one line, a file that is not such a sidecar and a volume that does not match it.
    /// </summary>
    public static ApplyPartFile Read(string sidecarPath, Func<string, Volume> readVolume, TextWriter? notes)
    {
        const string remedy = "give the .json files written by 'stackbuild apply --sections', unedited";
        ApplyRecord? record;
        try
        {
            record = System.Text.Json.JsonSerializer.Deserialize<ApplyRecord>(File.ReadAllText(sidecarPath));
        }
        catch (System.Text.Json.JsonException)
        {
            throw new InputProblemException(sidecarPath, "not a part of an applied volume (the JSON is not valid or not a part's sidecar)", remedy);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new InputProblemException(sidecarPath, "the file cannot be read", "check the path and permissions");
        }
        if (record?.Part is not { Sections: [int first, int last], Drawn: not null, Options: not null } part || first > last || record.Sections is null)
            throw new InputProblemException(sidecarPath, "not a part of an applied volume (it has no valid \"part\" with a range of sections)", remedy);
        if (record.Volume is null)
            throw new InputProblemException(sidecarPath, "it names no volume file", remedy);
        SidecarFile.CheckVolume(sidecarPath, record.Volume, record.VolumeSha256, notes);
        var volume = Path.Combine(Path.GetDirectoryName(Path.GetFullPath(sidecarPath)) ?? ".", record.Volume);
        return new ApplyPartFile(sidecarPath, record, () => readVolume(volume));
    }

    /// <summary>
    /// The parts' ranges against the build's sections: every section in exactly one part. Refuses, in one line, a section in
    /// two parts (naming both) or in none, and a part whose drawn sections are not those <paramref name="plan"/> draws in its
    /// range now (the image set changed since it was rendered). Returns, for each drawn section number, its part and plane.
    /// </summary>
    public static Dictionary<int, (int Part, int Plane)> Check(ApplyPlan plan, IReadOnlyList<ApplyPartFile> parts)
    {
        if (parts.Count == 0) throw new ArgumentException("No parts.", nameof(parts));
        var owner = new Dictionary<int, int>();
        var numbers = plan.Build.Sections.Select(s => s.Number).Order().ToList();
        for (int p = 0; p < parts.Count; p++)
        {
            var range = parts[p].Record.Part!.Sections;
            var both = numbers.Where(n => n >= range[0] && n <= range[1] && owner.ContainsKey(n)).ToList();
            if (both.Count > 0)
                throw new InputProblemException(parts[p].SidecarPath,
                    $"its sections {SectionNumbers.Runs(both)} are also in {Path.GetFileName(parts[owner[both[0]]].SidecarPath)}: the parts overlap",
                    "give parts whose --sections ranges do not overlap");
            foreach (int n in numbers.Where(n => n >= range[0] && n <= range[1])) owner[n] = p;
        }
        var none = numbers.Where(n => !owner.ContainsKey(n)).ToList();
        if (none.Count > 0)
            throw new InputProblemException(parts[0].SidecarPath,
                $"sections {SectionNumbers.Runs(none)} of the build are in none of the {parts.Count} parts given",
                $"render them with apply --sections (e.g. --sections {none[0]}-{none[^1]}) and merge all parts together");
        var where = new Dictionary<int, (int Part, int Plane)>();
        for (int p = 0; p < parts.Count; p++)
        {
            var part = parts[p].Record.Part!;
            var expected = plan.Sections.Where(s => owner.GetValueOrDefault(s.Entry.Number, -1) == p && s.ImageToPlane is not null
                && s.Status is SectionOutcome.Aligned or SectionOutcome.Placed).Select(s => s.Entry.Number).ToList();
            if (!expected.SequenceEqual(part.Drawn))
                throw new InputProblemException(parts[p].SidecarPath,
                    $"it holds sections {SectionNumbers.Runs(part.Drawn)}, but the image set now gives {SectionNumbers.Runs(expected)} in its range",
                    "render this part again from the same image set and build");
            for (int n = 0; n < part.Drawn.Count; n++) where[part.Drawn[n]] = (p, n);
        }
        return where;
    }

    /// <summary>
    /// Puts parts together into the volume one whole <see cref="ApplyStage.Apply"/> run gives, voxel for voxel: the parts'
    /// planes take the place of drawing (<see cref="RenderStage.RenderPlanes"/>), so gap filling, resampling along the stack
    /// and rounding are the whole run's own. One part's planes are held at a time.
    /// </summary>
    public static ApplyResult Merge(ApplyPlan plan, IReadOnlyList<ApplyPartFile> parts, DateTime createdUtc, IProgress<string>? progress = null)
    {
        Volume? volume = null;
        var record = MergeInto(plan, parts, (count, affine) => new RenderStage.VolumeSink(volume = new Volume(plan.Target.Nx, plan.Target.Ny, count, affine)),
            createdUtc, progress);
        volume!.Affine = Affine.FromRows(record.Affine[0], record.Affine[1], record.Affine[2]);
        return new ApplyResult(volume, record, plan.Bits);
    }

    /// <summary>As <see cref="Merge"/>, the finished planes handed to the sink <paramref name="open"/> makes and not kept.</summary>
    public static ApplyRecord MergeInto(ApplyPlan plan, IReadOnlyList<ApplyPartFile> parts, Func<int, Affine, RenderStage.IPlaneSink> open,
        DateTime createdUtc, IProgress<string>? progress = null)
    {
        var where = Check(plan, parts);
        int nx = plan.Target.Nx, ny = plan.Target.Ny;
        int loadedPart = -1;
        Volume? loaded = null;
        bool Draw(RenderedSection r, Span<float> plane)
        {
            if (!where.TryGetValue(r.Entry.Number, out var at)) return false;
            if (at.Part != loadedPart)
            {
                loaded = null; // let the previous part go before reading the next
                loaded = parts[at.Part].ReadPlanes();
                if (loaded.Nx != nx || loaded.Ny != ny || loaded.Nz < parts[at.Part].Record.Part!.Drawn.Count)
                    throw new InputProblemException(parts[at.Part].SidecarPath,
                        $"its volume is {loaded.Nx} × {loaded.Ny} × {loaded.Nz}, not {nx} × {ny} with a plane for each of its {parts[at.Part].Record.Part!.Drawn.Count} sections",
                        "render this part again");
                loadedPart = at.Part;
            }
            loaded!.Plane(at.Plane).CopyTo(plane);
            return true;
        }
        var streamed = RenderStage.RenderPlanes(plan.Sections, nx, ny, plan.Planes, plan.Target.Affine, plan.Settings, Draw, open, progress);
        return ApplyStage.Record(plan, streamed.Sections, streamed.Planes, streamed.Affine, createdUtc).Record;
    }
}
