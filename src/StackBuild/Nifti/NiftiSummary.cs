namespace StackBuild.Nifti;

/// <summary>
/// What a NIfTI-1 file holds, in plain values for display or JSON: sizes, geometry in mm, type, scaling and the
/// value range. Geometry comes from the image's one affine (<see cref="NiftiImage.Affine"/>); voxel sizes and
/// axis codes are derived from it.
/// </summary>
public sealed record NiftiSummary
{
    public required string File { get; init; }
    /// <summary>dim[1..dim[0]].</summary>
    public required int[] Shape { get; init; }
    public required int Volumes { get; init; }
    /// <summary>Length of each voxel axis in mm (column norms of the affine).</summary>
    public required double[] VoxelSizeMm { get; init; }
    /// <summary>Voxel size × number of voxels along i, j, k, in mm.</summary>
    public required double[] ExtentMm { get; init; }
    public required string DataType { get; init; }
    public required int BitsPerVoxel { get; init; }
    /// <summary>Three-letter codes for (i, j, k), e.g. RIP.</summary>
    public required string AxisCodes { get; init; }
    /// <summary>Voxel (i, j, k) to RAS+ mm, four rows.</summary>
    public required double[][] AffineMm { get; init; }
    /// <summary>"sform", "qform" or "pixdim": which header fields the affine came from.</summary>
    public required string AffineSource { get; init; }
    public required int QformCode { get; init; }
    public required int SformCode { get; init; }
    /// <summary>Largest difference between the qform and the sform in mm, when both are set; else null.</summary>
    public required double? QformSformDifferenceMm { get; init; }
    public required string Description { get; init; }
    /// <summary>scl_slope and scl_inter when the stored values are scaled; null when not.</summary>
    public required double? ScaleSlope { get; init; }
    public required double? ScaleIntercept { get; init; }
    /// <summary>Smallest and largest finite value (after scaling; luminance for rgb24); null when no value is finite.</summary>
    public required double? DataMin { get; init; }
    public required double? DataMax { get; init; }
    public required double CalMin { get; init; }
    public required double CalMax { get; init; }
    /// <summary>The spatial unit stored in the header (mm, µm, m); values here are always in mm.</summary>
    public required string HeaderUnit { get; init; }
    public required bool BigEndian { get; init; }

    /// <summary>Reads <paramref name="path"/> (all voxels, to find the value range) and summarises it.</summary>
    public static NiftiSummary Read(string path) => Of(NiftiFile.Read(path), path);

    public static NiftiSummary Of(NiftiImage image, string path)
    {
        var h = image.Header;
        var a = image.Affine;
        var (si, sj, sk) = a.VoxelSizes;
        double[] sizes = [si, sj, sk];
        var range = image.DataRange();
        double? difference = null;
        if (h.QformCode > 0 && h.SformCode > 0)
        {
            var (q, s) = (h.QformAffine, h.SformAffine);
            double d = 0;
            for (int r = 0; r < 3; r++) for (int c = 0; c < 4; c++) d = Math.Max(d, Math.Abs(q[r, c] - s[r, c]));
            difference = d;
        }
        return new NiftiSummary
        {
            File = path,
            Shape = image.Shape,
            Volumes = image.VolumeCount,
            VoxelSizeMm = sizes,
            ExtentMm = Enumerable.Range(0, 3).Select(d => sizes[d] * (d < image.Shape.Length ? image.Shape[d] : 1)).ToArray(),
            DataType = NiftiDataTypes.Name(image.DataType),
            BitsPerVoxel = 8 * NiftiDataTypes.BytesPerVoxel(image.DataType),
            AxisCodes = a.AxisCodes.Code,
            AffineMm = a.ToRows(),
            AffineSource = h.AffineSource.ToString().ToLowerInvariant(),
            QformCode = h.QformCode,
            SformCode = h.SformCode,
            QformSformDifferenceMm = difference,
            Description = h.Description,
            ScaleSlope = h.Scaling?.Slope,
            ScaleIntercept = h.Scaling?.Inter,
            DataMin = range?.Min,
            DataMax = range?.Max,
            CalMin = h.CalMin,
            CalMax = h.CalMax,
            HeaderUnit = h.SpatialUnitName,
            BigEndian = h.IsBigEndian,
        };
    }

    /// <summary>The meaning of a qform/sform code (nifti1.h NIFTI_XFORM_*).</summary>
    public static string XformCodeName(int code) => code switch
    {
        0 => "not set",
        1 => "scanner anatomical",
        2 => "aligned anatomical",
        3 => "Talairach",
        4 => "MNI 152",
        _ => "unknown code",
    };
}
