using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Template;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The template seen as a stack of planes, checked against SciPy's <c>ndimage.map_coordinates(order=1)</c> on the
/// Colin27 "ch2" MRI template (Debian mricron-data), read independently with nibabel by tests/tools/scipy_template.py.
/// </summary>
public class TemplateVolumeTests(ITestOutputHelper output)
{
    [Theory]
    [InlineData('k', 70.3, 0.7)]
    [InlineData('j', 100.6, 1.3)]
    [InlineData('i', 90.0, 0.5)]
    [InlineData('k', 60.0, 3.0)]
    public void SliceMatchesScipyMapCoordinates(char axis, double k, double pixelMm)
    {
        var template = TemplateVolume.Load(RegisterMriTests.TemplatePath, axis);
        var ours = template.Slice(k, pixelMm, out var toPlane);
        string raw = Path.Combine(Path.GetTempPath(), $"stackbuild-template-slice-{Guid.NewGuid():N}.raw");
        try
        {
            var json = JsonDocument.Parse(NiftiPython.Run("scipy_template.py", "slice", RegisterMriTests.TemplatePath, axis.ToString(),
                k.ToString(System.Globalization.CultureInfo.InvariantCulture), pixelMm.ToString(System.Globalization.CultureInfo.InvariantCulture), raw)).RootElement;
            Assert.Equal(json.GetProperty("width").GetInt32(), ours.Width);
            Assert.Equal(json.GetProperty("height").GetInt32(), ours.Height);
            var bytes = File.ReadAllBytes(raw);
            var reference = new float[bytes.Length / 4];
            Buffer.BlockCopy(bytes, 0, reference, 0, bytes.Length);
            double worst = 0, max = reference.Max();
            for (int p = 0; p < reference.Length; p++) worst = Math.Max(worst, Math.Abs(reference[p] - ours.Pixels[p]));
            output.WriteLine($"axis {axis}, plane {k}, {pixelMm} mm: {ours.Width}×{ours.Height}, largest difference from SciPy {worst:G3} (range 0–{max})");
            // Both are trilinear interpolation of the same uint8 voxels; ours runs in float32, so allow float rounding only
            // (1e-4 of the range; this project's bound).
            Assert.True(worst <= 1e-4 * max, $"largest difference {worst}");
            Assert.True(reference.Count(v => v > 0.1 * max) > reference.Length / 10, "the slice must cut through the head");
            // The map returned puts slice pixel edges on plane pixel edges.
            var (x, y) = toPlane.Apply(-0.5, -0.5);
            Assert.Equal(-0.5, x, 9);
            Assert.Equal(-0.5, y, 9);
        }
        finally
        {
            File.Delete(raw);
        }
    }

    [Fact]
    public void FineDetailDoesNotAliasIntoACoarseSlice()
    {
        // Stripes one voxel wide (0, 1, 0, 1, … along i) sliced at 3 voxels per pixel: sampled without smoothing, every
        // pixel lands on a stripe centre (1, 0, 1, …: sd 0.5); smoothed first, the slice shows their mean, 0.5.
        var volume = new Volume(60, 40, 3, Affine.FromRows([1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0]));
        for (int k = 0; k < 3; k++) for (int j = 0; j < 40; j++) for (int i = 0; i < 60; i++) volume[i, j, k] = i % 2;
        var slice = TemplateVolume.FromVolume(volume, 'k').Slice(1, 3.0, out _);
        var inner = Enumerable.Range(2, slice.Width - 4).SelectMany(x => Enumerable.Range(2, slice.Height - 4).Select(y => (double)slice[x, y])).ToList();
        double mean = inner.Average(), sd = Math.Sqrt(inner.Average(v => (v - mean) * (v - mean)));
        output.WriteLine($"{slice.Width}×{slice.Height}: mean {mean:0.###}, sd {sd:0.###}");
        Assert.InRange(mean, 0.45, 0.55);
        Assert.True(sd < 0.05, $"sd {sd}: the stripes alias into the slice");
    }

    [Fact]
    public void VoxelToWorldPermutesTheAffine()
    {
        var volume = NiftiFile.Read(RegisterMriTests.TemplatePath).ToVolume();
        var byJ = TemplateVolume.FromVolume(volume, 'j');
        var byI = TemplateVolume.FromVolume(volume, 'i');
        Assert.Equal((volume.Nx, volume.Nz, volume.Ny), (byJ.Width, byJ.Height, byJ.Planes));
        Assert.Equal((volume.Ny, volume.Nz, volume.Nx), (byI.Width, byI.Height, byI.Planes));
        Assert.Equal(volume.Affine.Apply(3, 7, 11), byJ.VoxelToWorld.Apply(3, 11, 7));
        Assert.Equal(volume.Affine.Apply(3, 7, 11), byI.VoxelToWorld.Apply(7, 11, 3));
        // ch2 has 1 mm voxels (its header, read by nibabel in SliceMatchesScipyMapCoordinates).
        Assert.Equal(1.0, byJ.PlaneSpacingMm, 9);
        Assert.True(byJ.ContainsPlane(-0.5) && byJ.ContainsPlane(volume.Ny - 0.5));
        Assert.False(byJ.ContainsPlane(-0.51) || byJ.ContainsPlane(volume.Ny - 0.49));
        // A plane on a voxel plane is that plane exactly.
        var plane = byJ.Slice(40, 1.0, out _);
        for (int z = 0; z < volume.Nz; z += 17) for (int x = 0; x < volume.Nx; x += 13) Assert.Equal(volume[x, 40, z], plane[x, z]);
    }

    [Fact]
    public void BadFilesAreRefusedWithTheFileAndWhatToDo()
    {
        string dir = Path.Combine(Path.GetTempPath(), $"stackbuild-template-{Guid.NewGuid():N}");
        Directory.CreateDirectory(dir);
        try
        {
            string garbage = Path.Combine(dir, "atlas.nii");
            File.WriteAllBytes(garbage, Enumerable.Range(0, 500).Select(i => (byte)(i * 7)).ToArray());
            var e = Assert.Throws<InputProblemException>(() => TemplateVolume.Load(garbage));
            Assert.Equal(garbage, e.File);
            Assert.False(string.IsNullOrWhiteSpace(e.Remedy));

            string missing = Path.Combine(dir, "none.nii.gz");
            Assert.Equal(missing, Assert.Throws<InputProblemException>(() => TemplateVolume.Load(missing)).File);

            // A flat volume has nothing to register to.
            string flat = Path.Combine(dir, "flat.nii");
            NiftiFile.Write(flat, new Volume(8, 8, 8, Geometry.Affine.Identity));
            var f = Assert.Throws<InputProblemException>(() => TemplateVolume.Load(flat));
            Assert.Contains("contrast", f.Problem);

            var axis = Assert.Throws<InputProblemException>(() => TemplateVolume.Load(RegisterMriTests.TemplatePath, 'x'));
            Assert.Contains("i, j or k", axis.Remedy);
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }
}
