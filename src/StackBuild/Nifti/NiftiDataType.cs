namespace StackBuild.Nifti;

/// <summary>
/// The NIfTI-1 voxel data types StackBuild reads (codes as defined by nifti1.h, <c>NIFTI_TYPE_*</c>).
/// All of them are read; <see cref="NiftiFile"/> writes UInt8, Int16, UInt16, Float32 and Rgb24.
/// </summary>
public enum NiftiDataType : short
{
    UInt8 = 2,
    Int16 = 4,
    Int32 = 8,
    Float32 = 16,
    Float64 = 64,
    /// <summary>Three bytes per voxel, interleaved R, G, B (nifti1.h <c>NIFTI_TYPE_RGB24</c>).</summary>
    Rgb24 = 128,
    Int8 = 256,
    UInt16 = 512,
}

/// <summary>The spatial unit written to <c>xyzt_units</c>. Whatever a file holds, StackBuild's affines are in mm.</summary>
public enum SpatialUnit
{
    /// <summary>nifti1.h <c>NIFTI_UNITS_MM</c> = 2.</summary>
    Millimetre,
    /// <summary>nifti1.h <c>NIFTI_UNITS_MICRON</c> = 3; pixdim and the qform/sform are then stored in µm.</summary>
    Micrometre,
}

/// <summary>What the qform or sform coordinates mean (nifti1.h <c>NIFTI_XFORM_*</c>).</summary>
public enum NiftiXformCode : short
{
    /// <summary>Not set: the transform is not to be used.</summary>
    Unknown = 0,
    /// <summary>Scanner-based (here: the specimen's own) anatomical coordinates.</summary>
    ScannerAnat = 1,
    /// <summary>Coordinates aligned to another file or to an anatomical truth.</summary>
    AlignedAnat = 2,
    Talairach = 3,
    Mni152 = 4,
}

/// <summary>Facts about each data type: size, range, name, and the codes nifti1.h defines but StackBuild does not read.</summary>
internal static class NiftiDataTypes
{
    public static bool IsKnown(short code) => Enum.IsDefined(typeof(NiftiDataType), code);

    public static bool IsWritable(NiftiDataType t) =>
        t is NiftiDataType.UInt8 or NiftiDataType.Int16 or NiftiDataType.UInt16 or NiftiDataType.Float32 or NiftiDataType.Rgb24;

    public static int BytesPerVoxel(NiftiDataType t) => t switch
    {
        NiftiDataType.UInt8 or NiftiDataType.Int8 => 1,
        NiftiDataType.Int16 or NiftiDataType.UInt16 => 2,
        NiftiDataType.Int32 or NiftiDataType.Float32 => 4,
        NiftiDataType.Float64 => 8,
        NiftiDataType.Rgb24 => 3,
        _ => throw new ArgumentOutOfRangeException(nameof(t)),
    };

    public static short BitPix(NiftiDataType t) => (short)(8 * BytesPerVoxel(t));

    public static bool IsInteger(NiftiDataType t) =>
        t is NiftiDataType.UInt8 or NiftiDataType.Int8 or NiftiDataType.Int16 or NiftiDataType.UInt16 or NiftiDataType.Int32;

    /// <summary>The range of stored values of an integer type.</summary>
    public static (double Min, double Max) IntegerRange(NiftiDataType t) => t switch
    {
        NiftiDataType.UInt8 => (byte.MinValue, byte.MaxValue),
        NiftiDataType.Int8 => (sbyte.MinValue, sbyte.MaxValue),
        NiftiDataType.Int16 => (short.MinValue, short.MaxValue),
        NiftiDataType.UInt16 => (ushort.MinValue, ushort.MaxValue),
        NiftiDataType.Int32 => (int.MinValue, int.MaxValue),
        _ => throw new ArgumentOutOfRangeException(nameof(t), "Not an integer data type."),
    };

    /// <summary>Lower-case names as nifti1.h's comments and most tools use them.</summary>
    public static string Name(NiftiDataType t) => t switch
    {
        NiftiDataType.UInt8 => "uint8",
        NiftiDataType.Int8 => "int8",
        NiftiDataType.Int16 => "int16",
        NiftiDataType.UInt16 => "uint16",
        NiftiDataType.Int32 => "int32",
        NiftiDataType.Float32 => "float32",
        NiftiDataType.Float64 => "float64",
        NiftiDataType.Rgb24 => "rgb24",
        _ => t.ToString(),
    };

    /// <summary>Names of the nifti1.h codes that StackBuild does not read, for a clear refusal.</summary>
    public static string? UnsupportedName(short code) => code switch
    {
        0 => "unknown (0)",
        1 => "binary (1)",
        32 => "complex64 (32)",
        1024 => "int64 (1024)",
        768 => "uint32 (768)",
        1280 => "uint64 (1280)",
        1536 => "float128 (1536)",
        1792 => "complex128 (1792)",
        2048 => "complex256 (2048)",
        2304 => "rgba32 (2304)",
        _ => null,
    };
}
