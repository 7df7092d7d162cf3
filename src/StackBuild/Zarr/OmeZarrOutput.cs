using System.Text.Json;
using StackBuild.IO;

namespace StackBuild.Zarr;

/// <summary>What may stand at an OME-Zarr output's path before a run writes it.</summary>
public static class OmeZarrOutput
{
    /// <summary>
    /// Refuses (<see cref="InputProblemException"/>) an OME-Zarr output path that holds a file, or a folder that is neither
    /// empty nor an image StackBuild wrote (<see cref="IsStackBuildImage"/>). A run replaces an earlier StackBuild image there as
    /// it replaces an earlier NIfTI volume; anything else in a folder of that name may be the user's, so it is left alone.
    /// </summary>
    public static void CheckReplaceable(string path)
    {
        if (File.Exists(path))
            throw new InputProblemException(path, "a file of that name is there, and an OME-Zarr output is a folder", "choose another output name, or move the file away");
        if (!Directory.Exists(path)) return;
        bool empty;
        try { empty = !Directory.EnumerateFileSystemEntries(path).Any(); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new InputProblemException(path, "the folder at this output path cannot be read", "choose another output name");
        }
        if (!empty && !IsStackBuildImage(path))
            throw new InputProblemException(path, "a folder of that name holds something StackBuild did not write there",
                "choose another output name, or empty the folder (an earlier StackBuild .ome.zarr output is replaced)");
    }

    /// <summary>
    /// True when <paramref name="folder"/> holds only what <see cref="OmeZarrWriter"/> writes at its top (<c>.zgroup</c>,
    /// <c>.zattrs</c> and level folders named by numbers) and its <c>.zattrs</c> carries StackBuild's own key
    /// (<see cref="OmeZarrWriter.AttributesKey"/>) beside "multiscales".
    /// </summary>
    public static bool IsStackBuildImage(string folder)
    {
        try
        {
            foreach (var entry in Directory.EnumerateFileSystemEntries(folder))
            {
                var name = Path.GetFileName(entry);
                bool known = name is ".zgroup" or ".zattrs"
                    ? File.Exists(entry)
                    : name.Length > 0 && name.All(char.IsAsciiDigit) && Directory.Exists(entry);
                if (!known) return false;
            }
            var attributes = Path.Combine(folder, ".zattrs");
            if (!File.Exists(attributes) || new FileInfo(attributes).Length > 1 << 20) return false;
            using var document = JsonDocument.Parse(File.ReadAllBytes(attributes));
            var root = document.RootElement;
            return root.ValueKind == JsonValueKind.Object
                && root.TryGetProperty(OmeZarrWriter.AttributesKey, out var own) && own.ValueKind == JsonValueKind.Object
                && root.TryGetProperty("multiscales", out var multiscales) && multiscales.ValueKind == JsonValueKind.Array;
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or JsonException)
        {
            return false;
        }
    }
}
