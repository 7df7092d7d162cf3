using System.Text.Json;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Pipeline;
using StackBuild.Zarr;

namespace StackBuild.Write;

/// <summary>
/// The output paths of a build: the volume and its sidecar (same base name, as BIDS does), and the report. The volume is a
/// NIfTI-1 file (OUT.nii.gz, OUT.nii) or an OME-Zarr folder (OUT.ome.zarr).
/// </summary>
public sealed record BuildOutputPaths(string Volume, string Sidecar)
{
    /// <summary>The quality report beside the sidecar: OUT.report.html.</summary>
    public string Report => Sidecar[..^".json".Length] + ".report.html";

    /// <summary>True when the volume is written as an OME-Zarr folder (the name ends in .ome.zarr).</summary>
    public bool IsOmeZarr => Volume.EndsWith(OmeZarrSuffix, StringComparison.OrdinalIgnoreCase);

    public const string OmeZarrSuffix = ".ome.zarr";

    /// <summary>Checks the volume path and derives the sidecar path; refuses names that are neither NIfTI nor OME-Zarr.</summary>
    public static BuildOutputPaths For(string volumePath)
    {
        string baseName;
        // A trailing slash, as shell completion adds to a folder's name, is not part of the name.
        if (volumePath.Length > 1 && volumePath.EndsWith('/') && volumePath.TrimEnd('/').EndsWith(OmeZarrSuffix, StringComparison.OrdinalIgnoreCase))
            volumePath = volumePath.TrimEnd('/');
        if (volumePath.EndsWith(".nii.gz", StringComparison.OrdinalIgnoreCase)) baseName = volumePath[..^7];
        else if (volumePath.EndsWith(".nii", StringComparison.OrdinalIgnoreCase)) baseName = volumePath[..^4];
        else if (volumePath.EndsWith(OmeZarrSuffix, StringComparison.OrdinalIgnoreCase)) baseName = volumePath[..^OmeZarrSuffix.Length];
        else if (volumePath.EndsWith(".zarr", StringComparison.OrdinalIgnoreCase))
            throw new InputProblemException(volumePath, "an OME-Zarr output's name must end in .ome.zarr (OME-NGFF's naming)", "end the output name with .ome.zarr");
        else throw new InputProblemException(volumePath, "the output must be a NIfTI-1 file or an OME-Zarr folder",
            "end the output name with .nii.gz (compressed), .nii, or .ome.zarr (chunked, several resolutions)");
        if (Path.GetFileName(baseName).Length == 0)
            throw new InputProblemException(volumePath, "the output name is empty", "give a file name such as volume.nii.gz");
        return new BuildOutputPaths(volumePath, baseName + ".json");
    }

    /// <summary>
    /// The paths of one volume of several written from one output name: <paramref name="suffix"/> added to the base name
    /// (OTHER.nii.gz with "_red" → OTHER_red.nii.gz and OTHER_red.json).
    /// </summary>
    public BuildOutputPaths WithSuffix(string suffix) =>
        suffix.Length == 0 ? this : For(Sidecar[..^".json".Length] + suffix + Volume[(Sidecar.Length - ".json".Length)..]);

    /// <summary>
    /// Checks, before any work is done, that the outputs can be written: the folder exists, a file can be created in it, none
    /// of the file outputs is a folder, and an OME-Zarr output's path is free, an empty folder, or an earlier StackBuild
    /// OME-Zarr image (which is replaced, as an earlier NIfTI volume is).
    /// </summary>
    public void CheckWritable()
    {
        var folder = Path.GetDirectoryName(Path.GetFullPath(Volume));
        if (folder is null || !Directory.Exists(folder))
            throw new InputProblemException(Volume, "the folder for this output does not exist", "create the folder first or choose another output path");
        foreach (var path in IsOmeZarr ? new[] { Sidecar, Report } : new[] { Volume, Sidecar, Report })
            if (Directory.Exists(path))
                throw new InputProblemException(path, "an output would replace a folder of that name", "choose another output name");
        if (IsOmeZarr) OmeZarrOutput.CheckReplaceable(Volume);
        AtomicFile.CheckFolderWritable(Volume, folder);
    }
}

/// <summary>
/// Writes a build's volume, sidecar and report as one set (<see cref="OutputSet"/>): all three are written under temporary
/// names first, then renamed into place volume, report, sidecar. The sidecar names the volume file and its SHA-256, so a
/// volume replaced or changed after the build, or a set cut short between its renames, is recognised by every command
/// that reads the sidecar (<see cref="SidecarFile.CheckVolume"/>).
/// </summary>
public static class BuildWriter
{
    public static readonly JsonSerializerOptions JsonOptions = new() { WriteIndented = true };

    /// <summary>
    /// Writes the three files from the result as given: it computes nothing but the volume file's checksum. Review the build
    /// first (<see cref="BuildReview.Review(BuildResult)"/>) for the sidecar and the report to carry each section's estimated
    /// placement error and flags. Returns the result with the record as written (the volume's name and checksum in it).
    /// </summary>
    /// <param name="beforeRename">Called with each output path just before its file is renamed into place (for tests).</param>
    public static BuildResult Write(BuildResult result, BuildOutputPaths paths, Action<string>? beforeRename = null)
    {
        var description = result.Record.Aligned ? "StackBuild aligned section series" : "StackBuild section series (unaligned)";
        paths.CheckWritable();
        using var set = new OutputSet(beforeRename);
        var volume = StageVolume(set, paths, result.Volume, result.InputBitDepth, description);
        var written = result with
        {
            Record = result.Record with { Volume = Path.GetFileName(paths.Volume), VolumeSha256 = SidecarFile.Sha256(volume) },
        };
        var report = new StringWriter();
        BuildReport.Render(report, written, Path.GetFileName(paths.Volume));
        set.Stage(paths.Report, s => WriteText(s, report.ToString()));
        set.Stage(paths.Sidecar, s => WriteText(s, JsonSerializer.Serialize(written.Record, JsonOptions) + "\n"));
        set.Commit();
        return written;
    }

    /// <summary>
    /// Writes an applied volume and its sidecar (<see cref="ApplyRecord"/>) as one set, as <see cref="Write"/> does, in the
    /// image set's bit depth. Refuses an output whose sidecar would replace the sidecar the placements came from.
    /// </summary>
    public static ApplyResult WriteApplied(ApplyResult result, BuildOutputPaths paths, Action<string>? beforeRename = null) =>
        WriteAppliedSet([(result, paths)], beforeRename)[0];

    /// <summary>
    /// Writes several applied volumes (one per channel or page) and their sidecars as one set: every volume is staged,
    /// then every sidecar, and all are put in place together or none.
    /// </summary>
    public static IReadOnlyList<ApplyResult> WriteAppliedSet(IReadOnlyList<(ApplyResult Result, BuildOutputPaths Paths)> outputs,
        Action<string>? beforeRename = null) =>
        WriteAppliedVolumes(outputs.Select(o => (o.Result.Record, o.Paths, (Func<OutputSet, string>)(set =>
            StageVolume(set, o.Paths, o.Result.Volume, o.Result.InputBitDepth, "StackBuild placements applied to another image set")))).ToList(),
            beforeRename).Select((record, i) => outputs[i].Result with { Record = record }).ToList();

    /// <summary>
    /// Writes the parts of an applied volume (<c>apply --sections</c>, one per channel or page) as one set: each part's
    /// drawn planes as float32 NIfTI-1 (nothing rounded, so the merge gives the whole run's voxels) and its sidecar.
    /// </summary>
    public static IReadOnlyList<ApplyRecord> WriteAppliedParts(IReadOnlyList<(ApplyRecord Record, Imaging.Volume Planes, BuildOutputPaths Paths)> parts,
        Action<string>? beforeRename = null) =>
        WriteAppliedVolumes(parts.Select(p => (p.Record, p.Paths, NiftiOnly(p.Paths, "a part (apply --sections) is written as NIfTI-1 only",
            "end the part's name with .nii.gz; stackbuild merge can then write the whole volume as .ome.zarr", (s, compress) =>
            NiftiFile.Write(s, compress, p.Planes, new NiftiWriteOptions
            {
                DataType = NiftiDataType.Float32,
                Description = "StackBuild applied volume, one part (merge)",
            })))).ToList(), beforeRename);

    /// <summary>
    /// Writes the red, green and blue volumes of an 8-bit colour image set as one NIfTI-1 RGB24 volume (R, G, B bytes
    /// interleaved per voxel, nifti1.h) with the red pass's sidecar, its channel "rgb".
    /// </summary>
    public static ApplyRecord WriteAppliedRgb(ApplyResult red, ApplyResult green, ApplyResult blue, BuildOutputPaths paths,
        Action<string>? beforeRename = null)
    {
        var v = red.Volume;
        if (red.InputBitDepth > 8 || green.InputBitDepth > 8 || blue.InputBitDepth > 8)
            throw new ArgumentException("RGB24 holds 8 bits a channel.", nameof(red));
        var bytes = new byte[3L * v.Voxels.Length];
        for (long i = 0; i < v.Voxels.Length; i++)
        {
            bytes[3 * i] = (byte)red.Volume.Voxels[i];
            bytes[3 * i + 1] = (byte)green.Volume.Voxels[i];
            bytes[3 * i + 2] = (byte)blue.Volume.Voxels[i];
        }
        var record = red.Record with { Channel = "rgb" };
        return WriteAppliedVolumes([(record, paths, NiftiOnly(paths, "an RGB24 colour volume is written as NIfTI-1 only",
            "end the output's name with .nii.gz, or give --channels split for one OME-Zarr image per channel", (s, compress) => NiftiFile.WriteRgb(s, compress, v.Nx, v.Ny, v.Nz, bytes, v.Affine,
            new NiftiWriteOptions { Description = "StackBuild placements applied to another image set" })))], beforeRename)[0];
    }

    /// <summary>
    /// Stages a NIfTI-1 file written by <paramref name="write"/> (a part or an RGB24 volume, which OME-Zarr output does not
    /// hold); an <c>.ome.zarr</c> name is refused with <paramref name="problem"/> and <paramref name="todo"/>.
    /// </summary>
    private static Func<OutputSet, string> NiftiOnly(BuildOutputPaths paths, string problem, string todo, Action<Stream, bool> write)
    {
        if (paths.IsOmeZarr) throw new InputProblemException(paths.Volume, problem, todo);
        return set => set.Stage(paths.Volume, s => write(s, NiftiFile.CompressedName(paths.Volume)));
    }

    private static List<ApplyRecord> WriteAppliedVolumes(IReadOnlyList<(ApplyRecord Record, BuildOutputPaths Paths, Func<OutputSet, string> StageVolume)> outputs,
        Action<string>? beforeRename)
    {
        foreach (var (record, paths, _) in outputs)
        {
            CheckNotReplacing(paths, record.PlacementsFrom);
            paths.CheckWritable();
        }
        using var set = new OutputSet(beforeRename);
        var written = outputs.Select(o =>
        {
            var volume = o.StageVolume(set);
            return o.Record with { Volume = Path.GetFileName(o.Paths.Volume), VolumeSha256 = SidecarFile.Sha256(volume) };
        }).ToList();
        for (int i = 0; i < outputs.Count; i++)
        {
            var record = written[i];
            set.Stage(outputs[i].Paths.Sidecar, s => WriteText(s, JsonSerializer.Serialize(record, JsonOptions) + "\n"));
        }
        set.Commit();
        return written;
    }

    /// <summary>
    /// Stages the volume as the output name asks (NIfTI-1 file, or OME-Zarr folder: <see cref="OmeZarrWriter"/>), 8-bit or
    /// 16-bit like the input; returns the temporary name, whose checksum the sidecar records (<see cref="SidecarFile.Sha256"/>).
    /// </summary>
    private static string StageVolume(OutputSet set, BuildOutputPaths paths, Imaging.Volume volume, int inputBitDepth, string description)
    {
        if (paths.IsOmeZarr)
        {
            var name = Path.GetFileName(paths.Volume)[..^BuildOutputPaths.OmeZarrSuffix.Length];
            return set.StageFolder(paths.Volume, folder => OmeZarrWriter.Write(folder, volume,
                inputBitDepth > 8 ? ZarrElementType.UInt16 : ZarrElementType.UInt8, name, description));
        }
        var type = inputBitDepth > 8 ? NiftiDataType.UInt16 : NiftiDataType.UInt8;
        return set.Stage(paths.Volume, s => NiftiFile.Write(s, NiftiFile.CompressedName(paths.Volume), volume,
            new NiftiWriteOptions { DataType = type, Description = description }));
    }

    private static void WriteText(Stream stream, string text)
    {
        using var writer = new StreamWriter(stream, new System.Text.UTF8Encoding(false), 1 << 16, leaveOpen: true);
        writer.Write(text);
    }

    /// <summary>Refuses, before any work, an applied volume whose sidecar would replace the sidecar its placements come from.</summary>
    public static void CheckNotReplacing(BuildOutputPaths paths, string placementsFrom)
    {
        if (string.Equals(Path.GetFullPath(paths.Sidecar), Path.GetFullPath(placementsFrom), StringComparison.Ordinal))
            throw new InputProblemException(paths.Volume, "this output's sidecar would replace the build's sidecar the placements come from",
                "choose another output name, e.g. the stain's or channel's name");
    }
}
