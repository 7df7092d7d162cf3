using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;

namespace StackBuild.Template;

/// <summary>
/// A reference volume (an atlas or MRI template) seen as a stack of planes along one of its voxel axes, so that
/// a histology section can be compared with the template plane at its depth. The affine stays the one truth
/// about where voxels are; <see cref="VoxelToWorld"/> only reorders its columns so that the plane index is the third.
/// </summary>
/// <remarks>
/// Plane pixels follow StackBuild's convention: x along the first in-plane voxel axis, y along the second,
/// (0, 0) at the centre of the first voxel. For cut axis k the in-plane axes are (i, j); for j they are (i, k);
/// for i they are (j, k).
/// </remarks>
public sealed class TemplateVolume
{
    private readonly Volume _volume;
    private readonly int[] _axes; // voxel axis (0 = i, 1 = j, 2 = k) for plane x, plane y, plane index

    private TemplateVolume(Volume volume, char cutAxis)
    {
        _volume = volume;
        CutAxis = char.ToLowerInvariant(cutAxis);
        _axes = CutAxis switch
        {
            'k' => [0, 1, 2],
            'j' => [0, 2, 1],
            'i' => [1, 2, 0],
            _ => throw new ArgumentException($"The cut axis must be i, j or k, not '{cutAxis}'.", nameof(cutAxis)),
        };
        int[] n = [volume.Nx, volume.Ny, volume.Nz];
        Width = n[_axes[0]];
        Height = n[_axes[1]];
        Planes = n[_axes[2]];
        var a = volume.Affine;
        double[] Row(int r) => [a[r, _axes[0]], a[r, _axes[1]], a[r, _axes[2]], a[r, 3]];
        VoxelToWorld = Affine.FromRows(Row(0), Row(1), Row(2));
        var sizes = VoxelToWorld.VoxelSizes;
        PixelWidthMm = sizes.I;
        PixelHeightMm = sizes.J;
        PlaneSpacingMm = sizes.K;
    }

    /// <summary>The voxel axis the template is cut along: 'i', 'j' or 'k'.</summary>
    public char CutAxis { get; }
    public int Width { get; }
    public int Height { get; }
    public int Planes { get; }
    public double PixelWidthMm { get; }
    public double PixelHeightMm { get; }
    public double PlaneSpacingMm { get; }

    /// <summary>Plane pixel (x, y) and plane index to RAS+ mm: the template's affine with its columns reordered.</summary>
    public Affine VoxelToWorld { get; }

    /// <summary>Reads a NIfTI-1 volume (.nii or .nii.gz, any datatype the reader supports; the first volume of a 4D file).</summary>
    /// <exception cref="InputProblemException">The file cannot be read, or holds no usable 3D volume.</exception>
    /// <summary>"PNG", "JPEG" or "TIFF" when the file starts like one (a common mistake: a section image given as the template); else null.</summary>
    public static string? ImageKind(string path)
    {
        try
        {
            using var f = File.OpenRead(path);
            Span<byte> b = stackalloc byte[4];
            if (f.Read(b) < 4) return null;
            if (b[0] == 0x89 && b[1] == (byte)'P' && b[2] == (byte)'N' && b[3] == (byte)'G') return "PNG";
            if (b[0] == 0xFF && b[1] == 0xD8 && b[2] == 0xFF) return "JPEG";
            if ((b[0] == (byte)'I' && b[1] == (byte)'I' && b[2] == 42 && b[3] == 0) || (b[0] == (byte)'M' && b[1] == (byte)'M' && b[2] == 0 && b[3] == 42)) return "TIFF";
            return null;
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            return null; // the NIfTI reader reports it
        }
    }

    public static TemplateVolume Load(string path, char cutAxis = 'k')
    {
        if (!"ijkIJK".Contains(cutAxis))
            throw new InputProblemException(path, $"the template cut axis '{cutAxis}' is not a voxel axis", "give i, j or k");
        if (ImageKind(path) is { } kind)
            throw new InputProblemException(path, $"is a {kind} image, not a NIfTI-1 volume",
                "give the template as a .nii or .nii.gz volume (stack blockface photographs into one volume first)");
        var image = NiftiFile.Read(path); // InputProblemException for anything wrong with the file itself
        Volume volume;
        try
        {
            volume = image.ToVolume();
        }
        catch (Exception e) when (e is InvalidOperationException or ArgumentException)
        {
            throw new InputProblemException(path, $"the template cannot be held in memory: {e.Message}", "give a smaller template (crop or downsample it)", e);
        }
        int[] n = [volume.Nx, volume.Ny, volume.Nz];
        int axis = char.ToLowerInvariant(cutAxis) - 'i';
        if (n.Where((_, a) => a != axis).Any(s => s < 2))
            throw new InputProblemException(path, $"the template is {volume.Nx}×{volume.Ny}×{volume.Nz} voxels: its planes across axis {cutAxis} are not images",
                "give a 3D template volume, or choose the axis the sections were cut along");
        if (Math.Abs(volume.Affine.Determinant3) < 1e-12)
            throw new InputProblemException(path, "the template's affine is singular (zero voxel size)", "fix the template's sform or pixdim");
        if (!volume.Voxels.Any(float.IsFinite) || volume.Voxels.Where(float.IsFinite).Distinct().Take(2).Count() < 2)
            throw new InputProblemException(path, "the template holds no contrast (all voxels equal or not finite)", "give a template volume with image data");
        SanitiseNonFinite(volume.Voxels);
        return new TemplateVolume(volume, cutAxis);
    }

    /// <summary>A template over a volume already in memory (not copied; do not change its voxels afterwards).</summary>
    public static TemplateVolume FromVolume(Volume volume, char cutAxis) => new(volume, cutAxis);

    /// <summary>True when plane index <paramref name="k"/> lies within the template (within half a plane of the first or last).</summary>
    public bool ContainsPlane(double k) => k >= -0.5 && k <= Planes - 0.5;

    /// <summary>
    /// A plane of the stack cut at a tilt: the plane through the centre of plane <paramref name="plane"/> turned by
    /// R = Rx(<paramref name="tiltXDegrees"/>)·Ry(<paramref name="tiltYDegrees"/>) in the stack's millimetre frame (x along the
    /// plane's pixels, y down its rows, z along the plane index; Rx turns y towards z, Ry turns z towards x). Pixel (x, y) of
    /// the result lies at the centre of plane <paramref name="plane"/> plus R·((x − (W − 1)/2)·pw, (y − (H − 1)/2)·ph, 0) mm:
    /// the same size and pixel size as <see cref="Plane"/>, sampled trilinearly, <paramref name="outside"/> where the point
    /// lies more than half a voxel outside the stack. Both tilts 0 give <see cref="Plane"/> (for a whole plane index).
    /// </summary>
    public GrayImage Oblique(double plane, double tiltXDegrees, double tiltYDegrees, float outside)
    {
        var r = TiltRotation(tiltXDegrees, tiltYDegrees);
        var image = new GrayImage(Width, Height);
        var stride = Strides();
        var voxels = _volume.Voxels;
        double cx = (Width - 1) / 2.0, cy = (Height - 1) / 2.0;
        double pw = PixelWidthMm, ph = PixelHeightMm, ps = PlaneSpacingMm;
        for (int y = 0; y < Height; y++)
        {
            var row = image.Row(y);
            double b = (y - cy) * ph;
            for (int x = 0; x < Width; x++)
            {
                double a = (x - cx) * pw;
                // Voxel coordinates of the point: the plane centre plus the turned offset, in pixels and planes.
                double u = cx + (r[0, 0] * a + r[0, 1] * b) / pw, v = cy + (r[1, 0] * a + r[1, 1] * b) / ph, w = plane + (r[2, 0] * a + r[2, 1] * b) / ps;
                row[x] = Trilinear(voxels, stride, u, v, w, outside);
            }
        }
        return image;
    }

    /// <summary>R = Rx(tx)·Ry(ty), the turn of <see cref="Oblique"/>; its third column is the tilted plane's normal.</summary>
    public static double[,] TiltRotation(double tiltXDegrees, double tiltYDegrees)
    {
        double tx = tiltXDegrees * Math.PI / 180, ty = tiltYDegrees * Math.PI / 180;
        double cx = Math.Cos(tx), sx = Math.Sin(tx), cy = Math.Cos(ty), sy = Math.Sin(ty);
        // Rx = [[1,0,0],[0,cx,−sx],[0,sx,cx]], Ry = [[cy,0,sy],[0,1,0],[−sy,0,cy]].
        return new double[,]
        {
            { cy, 0, sy },
            { sx * sy, cx, -sx * cy },
            { -cx * sy, sx, cx * cy },
        };
    }

    private float Trilinear(float[] voxels, long[] stride, double u, double v, double w, float outside)
    {
        if (u < -0.5 || v < -0.5 || w < -0.5 || u > Width - 0.5 || v > Height - 0.5 || w > Planes - 0.5) return outside;
        u = Math.Clamp(u, 0, Width - 1); v = Math.Clamp(v, 0, Height - 1); w = Math.Clamp(w, 0, Planes - 1);
        int u0 = Math.Min((int)u, Math.Max(0, Width - 2)), v0 = Math.Min((int)v, Math.Max(0, Height - 2)), w0 = Math.Min((int)w, Math.Max(0, Planes - 2));
        double fu = u - u0, fv = v - v0, fw = w - w0;
        long su = Width > 1 ? stride[0] : 0, sv = Height > 1 ? stride[1] : 0, sw = Planes > 1 ? stride[2] : 0;
        long p = u0 * stride[0] + v0 * stride[1] + w0 * stride[2];
        double c00 = voxels[p] + (voxels[p + su] - voxels[p]) * fu;
        double c10 = voxels[p + sv] + (voxels[p + sv + su] - voxels[p + sv]) * fu;
        double c01 = voxels[p + sw] + (voxels[p + sw + su] - voxels[p + sw]) * fu;
        double c11 = voxels[p + sw + sv] + (voxels[p + sw + sv + su] - voxels[p + sw + sv]) * fu;
        double c0 = c00 + (c10 - c00) * fv, c1 = c01 + (c11 - c01) * fv;
        return (float)(c0 + (c1 - c0) * fw);
    }

    /// <summary>Plane <paramref name="plane"/> of the stack, as an image (Width × Height).</summary>
    public GrayImage Plane(int plane)
    {
        if (plane < 0 || plane >= Planes) throw new ArgumentOutOfRangeException(nameof(plane));
        var image = new GrayImage(Width, Height);
        var stride = Strides();
        long basis = plane * stride[2];
        var voxels = _volume.Voxels;
        for (int y = 0; y < Height; y++)
        {
            var row = image.Row(y);
            long p = basis + y * stride[1];
            for (int x = 0; x < Width; x++, p += stride[0]) row[x] = voxels[p];
        }
        return image;
    }

    /// <summary>
    /// The template plane at fractional index <paramref name="k"/> (linear between the two nearest planes, clamped to
    /// the first and last within half a plane), resampled bilinearly to square pixels of <paramref name="pixelSizeMm"/>
    /// covering the same field of view (pixel edges kept). Together this is trilinear interpolation of the volume.
    /// When the new pixels are larger than the template's (a finely photographed blockface sliced at the registration
    /// pixel size), the plane is first smoothed along that axis by a Gaussian of σ = (s − 1)/2 template pixels for a
    /// size ratio s, the anti-aliasing scikit-image's <c>transform.resize</c> applies (kernel and edge handling as
    /// SciPy's <c>ndimage.gaussian_filter</c> with <c>mode='nearest'</c>), so that fine detail does not alias into
    /// the slice the section is matched to.
    /// <paramref name="slicePixelToPlanePixel"/> maps the returned image's pixels to template plane pixels.
    /// </summary>
    public GrayImage Slice(double k, double pixelSizeMm, out Transform2D slicePixelToPlanePixel)
    {
        if (!ContainsPlane(k)) throw new ArgumentOutOfRangeException(nameof(k), $"Plane {k} is outside the template's 0..{Planes - 1}.");
        if (!(pixelSizeMm > 0) || !double.IsFinite(pixelSizeMm)) throw new ArgumentOutOfRangeException(nameof(pixelSizeMm));
        double kc = Math.Clamp(k, 0, Planes - 1);
        int k0 = Math.Min((int)Math.Floor(kc), Planes - 1), k1 = Math.Min(k0 + 1, Planes - 1);
        float t = (float)(kc - k0);
        var plane = Plane(k0);
        if (t > 0 && k1 != k0)
        {
            var next = Plane(k1);
            var p = plane.Pixels; var q = next.Pixels;
            for (int i = 0; i < p.Length; i++) p[i] = p[i] * (1 - t) + q[i] * t;
        }
        double sx = pixelSizeMm / PixelWidthMm, sy = pixelSizeMm / PixelHeightMm; // plane pixels per slice pixel
        if (sx > 1 || sy > 1) plane = GaussianFilter.Blur(plane, AntiAliasing(sx), AntiAliasing(sy));
        int width = Math.Max(1, (int)Math.Round(Width / sx)), height = Math.Max(1, (int)Math.Round(Height / sy));
        // Pixel edges kept: plane x = (slice x + 0.5)·sx − 0.5.
        slicePixelToPlanePixel = new Transform2D(sx, 0, 0.5 * sx - 0.5, 0, sy, 0.5 * sy - 0.5);
        return Resampler.Warp(plane, slicePixelToPlanePixel, width, height, 0f);
    }

    /// <summary>The kernel for a size ratio s: σ = (s − 1)/2, SciPy's radius; none when s ≤ 1.</summary>
    private static double[]? AntiAliasing(double s) =>
        s > 1 ? GaussianFilter.Kernel((s - 1) / 2, GaussianFilter.ScipyRadius((s - 1) / 2)) : null;

    private long[] Strides()
    {
        long[] voxel = [1, _volume.Nx, (long)_volume.Nx * _volume.Ny];
        return [voxel[_axes[0]], voxel[_axes[1]], voxel[_axes[2]]];
    }

    private static void SanitiseNonFinite(float[] voxels)
    {
        for (int i = 0; i < voxels.Length; i++) if (!float.IsFinite(voxels[i])) voxels[i] = 0;
    }
}
