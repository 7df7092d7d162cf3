using System.Text.Json;
using StackBuild.Pipeline;
using StackBuild.Render;
using StackBuild.Write;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The sidecar's promise — `matrix` maps input pixels to (i, j) voxels of the section's plane — checked with
/// reference libraries only: nibabel reads the volume, scikit-image the scans, and SciPy's
/// ndimage.map_coordinates (order 1) resamples each scan through the inverse matrix (Debian python3-nibabel,
/// python3-scipy, python3-skimage).
/// </summary>
public sealed class SidecarMatrixScipyTests : IDisposable
{
    private readonly string _dir = Directory.CreateTempSubdirectory("sb-matrix-").FullName;

    public void Dispose()
    {
        try { Directory.Delete(_dir, true); } catch (IOException) { }
    }

    [Fact]
    public void SidecarMatricesPutEachScanWhereTheVolumeHasIt()
    {
        // The demo series, aligned, at its own pixel size (20 µm), without gap filling.
        var result = BuildPipeline.Run(new BuildOptions { Input = RepositoryPaths.DemoSeries, Fill = GapFill.None });
        var paths = BuildOutputPaths.For(Path.Combine(_dir, "demo.nii.gz"));
        BuildWriter.Write(BuildReview.Review(result), paths);

        var json = PythonTool.Run("scipy_sidecar_matrix.py", paths.Volume, paths.Sidecar, RepositoryPaths.DemoSeries, "12");
        var sections = JsonDocument.Parse(json).RootElement.EnumerateArray().ToList();
        Assert.Equal(12, sections.Count);
        foreach (var s in sections)
        {
            int number = s.GetProperty("number").GetInt32();
            double mad = s.GetProperty("mad").GetDouble();
            var offset = s.GetProperty("best_offset").EnumerateArray().Select(v => v.GetInt32()).ToArray();
            // The volume is the scan resampled bilinearly and rounded to 8 bits: differences are rounding-sized
            // (measured 0.25 grey levels); a sidecar one voxel off measured 2.8–3.0 with the best offset moved.
            Assert.True(mad < 1.0, $"section {number}: mean difference {mad:0.###} grey levels");
            Assert.Equal([0, 0], offset);
        }
    }
}
