using System.Buffers.Binary;
using System.Text;
using StackBuild.Geometry;
using StackBuild.IO;

namespace StackBuild.Nifti;

/// <summary>Which of the header's three geometry methods an image's affine came from (nifti1.h "METHOD 1/2/3").</summary>
public enum NiftiAffineSource
{
    /// <summary>Method 3: the sform rows (used when sform_code &gt; 0).</summary>
    Sform,
    /// <summary>Method 2: the quaternion, qoffset and pixdim (used when only qform_code &gt; 0).</summary>
    Qform,
    /// <summary>Method 1: voxel sizes on the diagonal, no rotation or origin (neither code set).</summary>
    Pixdim,
}

/// <summary>
/// The 348-byte NIfTI-1 header, field by field, as laid out in nifti1.h (the NIfTI-1 standard,
/// nifti.nimh.nih.gov). Field names follow the standard's so they can be looked up there.
/// Values are as stored: pixdim, qoffset and srow are in the file's own spatial unit (<see cref="XyztUnits"/>);
/// the <c>...Affine</c> members convert to millimetres.
/// </summary>
public sealed class NiftiHeader
{
    /// <summary>sizeof_hdr: always 348 for NIfTI-1.</summary>
    public const int HeaderSize = 348;

    /// <summary>Smallest vox_offset of a single-file (.nii) image: the header plus the 4-byte extension flag.</summary>
    public const int SingleFileMinimumOffset = 352;

    public int SizeOfHdr { get; set; } = HeaderSize;

    /// <summary>True when the file was stored big-endian (told by sizeof_hdr reading 348 only when byte-swapped).</summary>
    public bool IsBigEndian { get; internal set; }

    public byte DimInfo { get; set; }

    /// <summary>dim[0] is the number of dimensions (1–7); dim[1..dim[0]] the sizes.</summary>
    public short[] Dim { get; set; } = [3, 1, 1, 1, 1, 1, 1, 1];

    public float IntentP1 { get; set; }
    public float IntentP2 { get; set; }
    public float IntentP3 { get; set; }
    public short IntentCode { get; set; }
    public NiftiDataType DataType { get; set; } = NiftiDataType.Float32;
    public short BitPix { get; set; } = 32;
    public short SliceStart { get; set; }

    /// <summary>pixdim[0] is qfac (±1, the handedness of the qform); pixdim[1..3] the voxel sizes in the file's unit.</summary>
    public float[] PixDim { get; set; } = [1, 1, 1, 1, 1, 1, 1, 1];

    public float VoxOffset { get; set; } = SingleFileMinimumOffset;
    public float SclSlope { get; set; } = 1;
    public float SclInter { get; set; }
    public short SliceEnd { get; set; }
    public byte SliceCode { get; set; }
    public byte XyztUnits { get; set; } = 2;
    public float CalMax { get; set; }
    public float CalMin { get; set; }
    public float SliceDuration { get; set; }
    public float TOffset { get; set; }
    public int GlMax { get; set; }
    public int GlMin { get; set; }

    /// <summary>descrip: free text, at most 79 characters plus the terminating zero.</summary>
    public string Description { get; set; } = "";

    public string AuxFile { get; set; } = "";
    public short QformCode { get; set; }
    public short SformCode { get; set; }
    public float QuaternB { get; set; }
    public float QuaternC { get; set; }
    public float QuaternD { get; set; }
    public float QOffsetX { get; set; }
    public float QOffsetY { get; set; }
    public float QOffsetZ { get; set; }
    public float[] SRowX { get; set; } = [0, 0, 0, 0];
    public float[] SRowY { get; set; } = [0, 0, 0, 0];
    public float[] SRowZ { get; set; } = [0, 0, 0, 0];
    public string IntentName { get; set; } = "";

    /// <summary>"n+1" for a single .nii file, "ni1" for a .hdr/.img pair (without the trailing zero).</summary>
    public string Magic { get; set; } = "n+1";

    /// <summary>The sizes dim[1..dim[0]].</summary>
    public int[] Shape => Enumerable.Range(1, Math.Clamp((int)Dim[0], 0, 7)).Select(i => (int)Dim[i]).ToArray();

    /// <summary>Number of voxels (product of the sizes), as a double so that absurd headers cannot overflow.</summary>
    public double VoxelCountEstimate => Shape.Aggregate(1.0, (p, n) => p * n);

    /// <summary>Millimetres per stored spatial unit: metre 1000, mm 1, µm 0.001; unknown (0) is taken as mm (common practice).</summary>
    public double MillimetresPerUnit => (XyztUnits & 7) switch { 1 => 1000.0, 3 => 0.001, _ => 1.0 };

    /// <summary>The spatial unit as text (nifti1.h NIFTI_UNITS_*): "m", "mm", "µm", or "not set" (then read as mm).</summary>
    public string SpatialUnitName => (XyztUnits & 7) switch { 1 => "m", 2 => "mm", 3 => "µm", _ => "not set" };

    /// <summary>
    /// The scaling to apply to stored values (value = stored × slope + inter), or null when there is none:
    /// scl_slope 0 means no scaling (nifti1.h); a non-finite slope is taken the same way (lenient, as nibabel does).
    /// RGB data is never scaled (nifti1.h: scaling does not apply to RGB).
    /// </summary>
    public (double Slope, double Inter)? Scaling
    {
        get
        {
            if (DataType == NiftiDataType.Rgb24 || SclSlope == 0 || !float.IsFinite(SclSlope)) return null;
            double inter = float.IsFinite(SclInter) ? SclInter : 0;
            if (SclSlope == 1 && inter == 0) return null;
            return (SclSlope, inter);
        }
    }

    /// <summary>Method 3: the sform rows, in mm.</summary>
    public Affine SformAffine => Affine.FromRows(
        Scaled(SRowX), Scaled(SRowY), Scaled(SRowZ));

    /// <summary>Method 2: the affine rebuilt from quatern_b/c/d, qoffset, pixdim and qfac, in mm.</summary>
    public Affine QformAffine
    {
        get
        {
            var a = NiftiQuaternion.ToAffine(QuaternB, QuaternC, QuaternD, QOffsetX, QOffsetY, QOffsetZ,
                PixDim[1], PixDim[2], PixDim[3], PixDim[0]);
            return ScaleToMm(a);
        }
    }

    /// <summary>Method 1: pixdim on the diagonal and no origin shift, in mm (nifti1.h: "for backwards compatibility").</summary>
    public Affine PixdimAffine
    {
        get
        {
            double u = MillimetresPerUnit;
            return Affine.FromRows([Size(1) * u, 0, 0, 0], [0, Size(2) * u, 0, 0], [0, 0, Size(3) * u, 0]);
        }
    }

    /// <summary>The method StackBuild uses: sform when sform_code &gt; 0, else qform when qform_code &gt; 0, else pixdim.</summary>
    public NiftiAffineSource AffineSource =>
        SformCode > 0 ? NiftiAffineSource.Sform : QformCode > 0 ? NiftiAffineSource.Qform : NiftiAffineSource.Pixdim;

    /// <summary>The voxel-to-world affine in RAS+ mm, from <see cref="AffineSource"/>.</summary>
    public Affine Affine => AffineSource switch
    {
        NiftiAffineSource.Sform => SformAffine,
        NiftiAffineSource.Qform => QformAffine,
        _ => PixdimAffine,
    };

    // A pixdim of 0 (or nonsense) is read as 1, as nifti1_io does for the qform.
    private double Size(int i) => PixDim[i] > 0 && float.IsFinite(PixDim[i]) ? PixDim[i] : 1.0;

    private double[] Scaled(float[] row)
    {
        double u = MillimetresPerUnit;
        return [row[0] * u, row[1] * u, row[2] * u, row[3] * u];
    }

    private Affine ScaleToMm(Affine a)
    {
        double u = MillimetresPerUnit;
        if (u == 1.0) return a;
        var s = Affine.FromRows([u, 0, 0, 0], [0, u, 0, 0], [0, 0, u, 0]);
        return a.Then(s);
    }

    /// <summary>
    /// Reads a header from its 348 bytes, strictly where the standard is strict: sizeof_hdr must read 348 in one
    /// byte order (which tells the endianness), the magic must be "n+1" (single file), the datatype must be one
    /// StackBuild reads, and dim[0] and the sizes must be in range. Everything else is taken as stored.
    /// </summary>
    internal static NiftiHeader Parse(ReadOnlySpan<byte> b, string path)
    {
        const string notNifti = "give a NIfTI-1 volume (.nii or .nii.gz)";
        if (b.Length == 0)
            throw new InputProblemException(path, "the file is empty (0 bytes)", "copy or write the file again (was a transfer interrupted?)");
        if (b.Length < 4)
            throw new InputProblemException(path, $"not a NIfTI-1 file: it is only {b.Length} bytes long", notNifti);
        int sizeLittle = BinaryPrimitives.ReadInt32LittleEndian(b);
        int sizeBig = BinaryPrimitives.ReadInt32BigEndian(b);
        bool big;
        if (sizeLittle == HeaderSize) big = false;
        else if (sizeBig == HeaderSize) big = true;
        else if (sizeLittle == 540 || sizeBig == 540)
            throw new InputProblemException(path, "this is a NIfTI-2 file (sizeof_hdr 540); StackBuild reads NIfTI-1",
                "save the volume as NIfTI-1 (.nii or .nii.gz) and try again");
        else
            throw new InputProblemException(path, $"not a NIfTI-1 file: the first four bytes (sizeof_hdr) are {sizeLittle}, not 348 in either byte order", notNifti);
        if (b.Length < HeaderSize)
            throw new InputProblemException(path, $"the file is truncated: it ends after {b.Length} bytes, inside the 348-byte NIfTI-1 header",
                "copy or write the file again (was a transfer interrupted?)");

        var r = new FieldReader(b, big);
        var h = new NiftiHeader { IsBigEndian = big, SizeOfHdr = HeaderSize };
        h.DimInfo = b[39];
        h.Dim = r.Shorts(40, 8);
        h.IntentP1 = r.Float(56);
        h.IntentP2 = r.Float(60);
        h.IntentP3 = r.Float(64);
        h.IntentCode = r.Short(68);
        short datatype = r.Short(70);
        h.BitPix = r.Short(72);
        h.SliceStart = r.Short(74);
        h.PixDim = r.Floats(76, 8);
        h.VoxOffset = r.Float(108);
        h.SclSlope = r.Float(112);
        h.SclInter = r.Float(116);
        h.SliceEnd = r.Short(120);
        h.SliceCode = b[122];
        h.XyztUnits = b[123];
        h.CalMax = r.Float(124);
        h.CalMin = r.Float(128);
        h.SliceDuration = r.Float(132);
        h.TOffset = r.Float(136);
        h.GlMax = r.Int(140);
        h.GlMin = r.Int(144);
        h.Description = Text(b.Slice(148, 80));
        h.AuxFile = Text(b.Slice(228, 24));
        h.QformCode = r.Short(252);
        h.SformCode = r.Short(254);
        h.QuaternB = r.Float(256);
        h.QuaternC = r.Float(260);
        h.QuaternD = r.Float(264);
        h.QOffsetX = r.Float(268);
        h.QOffsetY = r.Float(272);
        h.QOffsetZ = r.Float(276);
        h.SRowX = r.Floats(280, 4);
        h.SRowY = r.Floats(296, 4);
        h.SRowZ = r.Floats(312, 4);
        h.IntentName = Text(b.Slice(328, 16));
        h.Magic = Text(b.Slice(344, 4));

        if (h.Magic == "ni1")
            throw new InputProblemException(path, "this is the header of a two-file NIfTI-1 pair (.hdr + .img), which StackBuild does not read",
                "save the volume as a single-file NIfTI-1 image (.nii or .nii.gz) and try again");
        if (h.Magic != "n+1")
            throw new InputProblemException(path, $"not a NIfTI-1 file: the magic code at byte 344 is '{h.Magic}', not 'n+1' (an old Analyze 7.5 file?)",
                "save the volume as NIfTI-1 (.nii or .nii.gz) and try again");

        if (!NiftiDataTypes.IsKnown(datatype))
        {
            var name = NiftiDataTypes.UnsupportedName(datatype);
            throw new InputProblemException(path,
                name is null ? $"the datatype code {datatype} is not defined by NIfTI-1" : $"voxels of type {name} are not supported",
                "save the volume as uint8, int8, int16, uint16, int32, float32, float64 or rgb24");
        }
        h.DataType = (NiftiDataType)datatype;

        if (h.Dim[0] < 1 || h.Dim[0] > 7)
            throw new InputProblemException(path, $"dim[0] (the number of dimensions) is {h.Dim[0]}; NIfTI-1 allows 1 to 7",
                "the header is damaged; write the file again");
        for (int i = 1; i <= h.Dim[0]; i++)
            if (h.Dim[i] < 1)
                throw new InputProblemException(path, $"dim[{i}] is {h.Dim[i]}; every size must be at least 1",
                    "the header is damaged; write the file again");
        if (!float.IsFinite(h.VoxOffset) || h.VoxOffset < 0 || h.VoxOffset > int.MaxValue)
            throw new InputProblemException(path, $"vox_offset is {h.VoxOffset}, not a byte position",
                "the header is damaged; write the file again");
        return h;
    }

    /// <summary>Where the voxel data starts. A single file cannot have it before byte 352; a smaller value is read as 352 (lenient, as nibabel does).</summary>
    internal long DataOffset => Math.Max((long)VoxOffset, SingleFileMinimumOffset);

    /// <summary>The 348 header bytes, little-endian.</summary>
    internal byte[] ToBytes()
    {
        var b = new byte[HeaderSize];
        var w = new FieldWriter(b);
        w.Int(0, HeaderSize);
        b[38] = (byte)'r'; // "regular": unused by NIfTI-1, set as Analyze 7.5 readers expect (common practice)
        b[39] = DimInfo;
        w.Shorts(40, Dim);
        w.Float(56, IntentP1);
        w.Float(60, IntentP2);
        w.Float(64, IntentP3);
        w.Short(68, IntentCode);
        w.Short(70, (short)DataType);
        w.Short(72, BitPix);
        w.Short(74, SliceStart);
        w.Floats(76, PixDim);
        w.Float(108, VoxOffset);
        w.Float(112, SclSlope);
        w.Float(116, SclInter);
        w.Short(120, SliceEnd);
        b[122] = SliceCode;
        b[123] = XyztUnits;
        w.Float(124, CalMax);
        w.Float(128, CalMin);
        w.Float(132, SliceDuration);
        w.Float(136, TOffset);
        w.Int(140, GlMax);
        w.Int(144, GlMin);
        WriteText(b.AsSpan(148, 80), Description);
        WriteText(b.AsSpan(228, 24), AuxFile);
        w.Short(252, QformCode);
        w.Short(254, SformCode);
        w.Float(256, QuaternB);
        w.Float(260, QuaternC);
        w.Float(264, QuaternD);
        w.Float(268, QOffsetX);
        w.Float(272, QOffsetY);
        w.Float(276, QOffsetZ);
        w.Floats(280, SRowX);
        w.Floats(296, SRowY);
        w.Floats(312, SRowZ);
        WriteText(b.AsSpan(328, 16), IntentName);
        WriteText(b.AsSpan(344, 4), Magic);
        return b;
    }

    /// <summary>Text up to the first zero byte; bytes outside printable ASCII show as '?'.</summary>
    private static string Text(ReadOnlySpan<byte> field)
    {
        int end = field.IndexOf((byte)0);
        if (end < 0) end = field.Length;
        var sb = new StringBuilder(end);
        foreach (byte c in field[..end]) sb.Append(c is >= 32 and < 127 ? (char)c : '?');
        return sb.ToString();
    }

    /// <summary>Writes printable ASCII, always leaving at least one terminating zero (so descrip holds at most 79 characters).</summary>
    private static void WriteText(Span<byte> field, string text)
    {
        field.Clear();
        int n = Math.Min(text.Length, field.Length - 1);
        for (int i = 0; i < n; i++) field[i] = text[i] is >= ' ' and < (char)127 ? (byte)text[i] : (byte)'?';
    }

    private readonly ref struct FieldReader(ReadOnlySpan<byte> b, bool big)
    {
        private readonly ReadOnlySpan<byte> _b = b;

        public short Short(int at) => big ? BinaryPrimitives.ReadInt16BigEndian(_b[at..]) : BinaryPrimitives.ReadInt16LittleEndian(_b[at..]);
        public int Int(int at) => big ? BinaryPrimitives.ReadInt32BigEndian(_b[at..]) : BinaryPrimitives.ReadInt32LittleEndian(_b[at..]);
        public float Float(int at) => big ? BinaryPrimitives.ReadSingleBigEndian(_b[at..]) : BinaryPrimitives.ReadSingleLittleEndian(_b[at..]);

        public short[] Shorts(int at, int n)
        {
            var v = new short[n];
            for (int i = 0; i < n; i++) v[i] = Short(at + 2 * i);
            return v;
        }

        public float[] Floats(int at, int n)
        {
            var v = new float[n];
            for (int i = 0; i < n; i++) v[i] = Float(at + 4 * i);
            return v;
        }
    }

    private readonly ref struct FieldWriter(Span<byte> b)
    {
        private readonly Span<byte> _b = b;

        public void Short(int at, short v) => BinaryPrimitives.WriteInt16LittleEndian(_b[at..], v);
        public void Int(int at, int v) => BinaryPrimitives.WriteInt32LittleEndian(_b[at..], v);
        public void Float(int at, float v) => BinaryPrimitives.WriteSingleLittleEndian(_b[at..], v);

        public void Shorts(int at, short[] v)
        {
            for (int i = 0; i < v.Length; i++) Short(at + 2 * i, v[i]);
        }

        public void Floats(int at, float[] v)
        {
            for (int i = 0; i < v.Length; i++) Float(at + 4 * i, v[i]);
        }
    }
}
