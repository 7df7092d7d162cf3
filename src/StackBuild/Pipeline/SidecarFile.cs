using System.Security.Cryptography;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.IO;

namespace StackBuild.Pipeline;

/// <summary>Reads a build's sidecar back, for the commands that use its stored placements (evaluate, apply, points).</summary>
public static class SidecarFile
{
    private const string Remedy = "give the .json written beside the volume by 'stackbuild build', unedited";

    /// <summary>
    /// The sidecar at <paramref name="path"/>, checked as far as its placements are used: it lists sections, and each
    /// stored matrix is 3×3. Refuses (<see cref="InputProblemException"/>) a file that is missing, unreadable or not a
    /// sidecar.
    /// </summary>
    public static BuildRecord Read(string path)
    {
        try
        {
            var record = JsonSerializer.Deserialize<BuildRecord>(File.ReadAllText(path))
                ?? throw new InputProblemException(path, "the sidecar is empty", Remedy);
            if (record.Sections is null)
                throw new InputProblemException(path, "the sidecar lists no sections", Remedy);
            // Fields written as null or missing by an edit: the commands read them without asking again.
            if (record.Parameters is null || record.Warnings is null || record.Dimensions is null || record.Affine is null || record.VoxelSizeMm is null
                || record.Sections.Any(s => s is null || s.Pairs?.Any(p => p is null) == true))
                throw new InputProblemException(path, "the sidecar has a field that is null or missing (parameters, warnings, dimensions, affine, voxel_size_mm or a section)", Remedy);
            foreach (var s in record.Sections)
            {
                if (s.Matrix is not { } m) continue;
                if (m.Length < 2 || m.Take(2).Any(row => row is null || row.Length != 3))
                    throw new InputProblemException(path, $"section {s.Number} has a matrix that is not 3×3", Remedy);
                // A placement maps the scan onto its plane one to one; points and apply invert it.
                var map = Transform2D.FromRows(m);
                if (m.Take(2).SelectMany(row => row).Any(v => !double.IsFinite(v)) || !double.IsFinite(map.Determinant) || !(Math.Abs(map.Determinant) >= 1e-300))
                    throw new InputProblemException(path, $"section {s.Number} has a matrix that cannot be inverted", Remedy);
            }
            return record;
        }
        catch (JsonException e)
        {
            // The serializer's own words name .NET types ("could not be converted to System.Double") or quote the damaged
            // text itself, bytes and line breaks included (found by fuzzing): say where instead.
            var line = e.LineNumber is { } l ? $"line {l + 1}, byte {e.BytePositionInLine + 1}" : "";
            var detail = e.Path is { Length: > 0 } where && e.Message.Contains("could not be converted", StringComparison.Ordinal)
                ? $"the value at {where} is not of the kind a sidecar holds there"
                : line.Length > 0 ? $"the JSON is not valid at {line}" : "the JSON is not valid";
            throw new InputProblemException(path, $"not a StackBuild sidecar ({detail})", Remedy);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new InputProblemException(path, "the sidecar cannot be read", "check the path and permissions");
        }
    }

    /// <summary>
    /// The sidecar's geometry, checked: three positive dimensions, an affine of three rows of four finite numbers with a
    /// non-zero determinant (the first three rows of the 4×4 matrix), and a positive output pixel size. Refuses a sidecar without them.
    /// </summary>
    public static (int Nx, int Ny, int Nz, Affine Affine) Geometry(BuildRecord record, string path)
    {
        if (record.Dimensions is not [> 0, > 0, > 0])
            throw new InputProblemException(path, "the sidecar has no dimensions of the volume (three positive numbers)", Remedy);
        // Written as the full 4×4 matrix; its last row is (0, 0, 0, 1) by definition and is not read.
        if (record.Affine is not { Length: 3 or 4 } rows || rows.Take(3).Any(r => r is not { Length: 4 } || r.Any(v => !double.IsFinite(v))))
            throw new InputProblemException(path, "the sidecar's affine is not a 4×4 matrix of numbers", Remedy);
        var affine = Affine.FromRows(rows[0], rows[1], rows[2]);
        if (!(Math.Abs(affine.Determinant3) > 0))
            throw new InputProblemException(path, "the sidecar's affine cannot be inverted (its determinant is 0)", Remedy);
        return (record.Dimensions[0], record.Dimensions[1], record.Dimensions[2], affine);
    }

    /// <summary>
    /// The sidecar at <paramref name="path"/> (<see cref="Read"/>), refused when the volume it belongs to has changed since
    /// the build (<see cref="CheckVolume"/>).
    /// </summary>
    /// <param name="notes">Where to say that the volume is missing, when it is (the placements are still used).</param>
    public static BuildRecord ReadWithVolume(string path, TextWriter? notes)
    {
        var record = Read(path);
        CheckVolume(path, record.Volume, record.VolumeSha256, notes);
        return record;
    }

    /// <summary>
    /// The sidecar's <c>volume_sha256</c>, lower-case hex: for a file (NIfTI), the SHA-256 of its bytes; for a folder (OME-Zarr),
    /// the SHA-256 of the list of its files, one line "SHA256␠␠RELATIVE/PATH\n" per file (the file's own SHA-256, two
    /// spaces, its path inside the folder with '/' between names), sorted by path byte by byte. That list is what
    /// <c>find . -type f -printf '%P\0' | LC_ALL=C sort -z | xargs -0 sha256sum</c> prints inside the folder, so the value can be
    /// checked without StackBuild.
    /// </summary>
    public static string Sha256(string path)
    {
        if (Directory.Exists(path)) return FolderSha256(path);
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 20);
        return Convert.ToHexStringLower(SHA256.HashData(stream));
    }

    private static string FolderSha256(string folder)
    {
        var files = Directory.EnumerateFiles(folder, "*", new EnumerationOptions { RecurseSubdirectories = true, AttributesToSkip = 0 })
            .Select(f => (Relative: Path.GetRelativePath(folder, f).Replace(Path.DirectorySeparatorChar, '/'), Full: f))
            .OrderBy(f => System.Text.Encoding.UTF8.GetBytes(f.Relative), ByteOrder.Instance)
            .ToList();
        var list = new System.Text.StringBuilder();
        foreach (var (relative, full) in files)
        {
            using var stream = new FileStream(full, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16);
            list.Append(Convert.ToHexStringLower(SHA256.HashData(stream))).Append("  ").Append(relative).Append('\n');
        }
        return Convert.ToHexStringLower(SHA256.HashData(System.Text.Encoding.UTF8.GetBytes(list.ToString())));
    }

    /// <summary>Byte-by-byte order of UTF-8 names (C locale's sort).</summary>
    private sealed class ByteOrder : IComparer<byte[]>
    {
        public static readonly ByteOrder Instance = new();
        public int Compare(byte[]? a, byte[]? b) => a.AsSpan().SequenceCompareTo(b);
    }

    /// <summary>
    /// Checks a sidecar against the volume it names: the file (or OME-Zarr folder) <paramref name="volumeName"/> in the sidecar's
    /// folder, else the volume with the sidecar's base name (OUT.nii.gz, OUT.nii or OUT.ome.zarr for OUT.json, renamed together). Refuses
    /// (<see cref="InputProblemException"/>) a volume whose SHA-256 is not the recorded one: it was changed or replaced after
    /// the build, or the build that wrote the set was stopped between its renames. A sidecar from before the checksum was
    /// recorded is not checked; a volume that is not there is noted on <paramref name="notes"/> and not refused (the
    /// placements do not need it).
    /// </summary>
    public static void CheckVolume(string sidecarPath, string? volumeName, string? sha256, TextWriter? notes)
    {
        if (sha256 is null) return;
        var folder = Path.GetDirectoryName(Path.GetFullPath(sidecarPath)) ?? ".";
        var volume = VolumeOf(sidecarPath, volumeName);
        if (volume is null)
        {
            notes?.WriteLine($"warning: {sidecarPath}: the volume it was written with ({volumeName ?? "its name is not recorded"}) is not beside it, " +
                "so it cannot be checked against its checksum; the stored placements are used as they are");
            return;
        }
        string actual;
        try { actual = Sha256(volume); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new InputProblemException(volume, "the volume beside the sidecar cannot be read to check it against the sidecar", "check the file's permissions");
        }
        if (!string.Equals(actual, sha256, StringComparison.OrdinalIgnoreCase))
            throw new InputProblemException(sidecarPath,
                $"its volume {Path.GetRelativePath(folder, volume)} does not match it (SHA-256 {Short(actual)}, the sidecar records {Short(sha256)}): " +
                "the volume was changed or replaced after the build, or the build that wrote them was stopped part-way",
                "build again to write a matching volume and sidecar, or put back the volume this sidecar was written with");
    }

    /// <summary>
    /// For a volume being read on its own (<c>info</c>): refuses it when the sidecar beside it (OUT.json) records another
    /// checksum for it. Nothing is checked when there is no such sidecar, when it is not a sidecar with a checksum, or when
    /// it names another volume file that is present (OUT.nii beside OUT.nii.gz).
    /// </summary>
    public static void CheckBeside(string volumePath)
    {
        string sidecar;
        if (volumePath.EndsWith(".nii.gz", StringComparison.OrdinalIgnoreCase)) sidecar = volumePath[..^7] + ".json";
        else if (volumePath.EndsWith(".nii", StringComparison.OrdinalIgnoreCase)) sidecar = volumePath[..^4] + ".json";
        else return;
        if (!File.Exists(sidecar) || !File.Exists(volumePath)) return;
        string? name, sha256;
        try
        {
            var bytes = File.ReadAllBytes(sidecar);
            using var document = JsonDocument.Parse(bytes);
            if (document.RootElement.ValueKind != JsonValueKind.Object) return;
            name = Text(document.RootElement, "volume");
            sha256 = Text(document.RootElement, "volume_sha256");
        }
        catch (Exception e) when (e is JsonException or IOException or UnauthorizedAccessException or InvalidOperationException)
        {
            // Not a sidecar this can read (InvalidOperationException: a string that is not UTF-8, found by fuzzing): the
            // volume is shown on its own.
            return;
        }
        if (sha256 is null) return;
        var named = VolumeOf(sidecar, name);
        if (named is not null && !SameFile(named, volumePath)) return;
        string actual = Sha256(volumePath);
        if (!string.Equals(actual, sha256, StringComparison.OrdinalIgnoreCase))
            throw new InputProblemException(volumePath,
                $"does not match its sidecar {Path.GetFileName(sidecar)} (SHA-256 {Short(actual)}, the sidecar records {Short(sha256)}): " +
                "the volume was changed or replaced after the build, or the build that wrote them was stopped part-way",
                "build again to write a matching volume and sidecar, or move the sidecar away to look at this volume on its own");

        static string? Text(JsonElement root, string key) =>
            root.TryGetProperty(key, out var value) && value.ValueKind == JsonValueKind.String ? value.GetString() : null;
    }

    /// <summary>The volume a sidecar names, found in the sidecar's folder, or the one with its base name; null when neither is there.</summary>
    private static string? VolumeOf(string sidecarPath, string? volumeName)
    {
        var full = Path.GetFullPath(sidecarPath);
        var folder = Path.GetDirectoryName(full) ?? ".";
        // Only a plain file name is looked for, in the sidecar's own folder (an edited name cannot point elsewhere).
        if (volumeName is { Length: > 0 } && volumeName == Path.GetFileName(volumeName) && volumeName.IndexOfAny(Path.GetInvalidFileNameChars()) < 0
            && volumeName is not "." and not "..")
        {
            var named = Path.Combine(folder, volumeName);
            if (File.Exists(named) || (IsFolderVolume(named) && Directory.Exists(named))) return named;
        }
        if (!full.EndsWith(".json", StringComparison.OrdinalIgnoreCase)) return null;
        var stem = full[..^5];
        foreach (var candidate in new[] { stem + ".nii.gz", stem + ".nii" })
            if (File.Exists(candidate)) return candidate;
        return Directory.Exists(stem + ".ome.zarr") ? stem + ".ome.zarr" : null;
    }

    /// <summary>An OME-Zarr volume is a folder (OUT.ome.zarr); every other volume is a file.</summary>
    private static bool IsFolderVolume(string path) => path.EndsWith(".ome.zarr", StringComparison.OrdinalIgnoreCase);

    private static bool SameFile(string a, string b) => string.Equals(Path.GetFullPath(a), Path.GetFullPath(b), StringComparison.Ordinal);

    private static string Short(string sha256) => sha256.Length > 12 ? sha256[..12] + "…" : sha256;
}
