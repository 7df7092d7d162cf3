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
            foreach (var s in record.Sections)
                if (s.Matrix is { } m && (m.Length < 2 || m.Take(2).Any(row => row is null || row.Length != 3)))
                    throw new InputProblemException(path, $"section {s.Number} has a matrix that is not 3×3", Remedy);
            return record;
        }
        catch (JsonException e)
        {
            throw new InputProblemException(path, $"not a StackBuild sidecar ({e.Message})", Remedy);
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
}
