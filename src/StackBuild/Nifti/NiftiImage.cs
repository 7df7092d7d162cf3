using System.Numerics;
using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Nifti;

/// <summary>
/// A NIfTI-1 image as read: the header, the voxels in their stored type (native byte order), and the affine.
/// Voxel index order is NIfTI's: i fastest, then j, k, then the volumes of a 4D series.
/// </summary>
public sealed class NiftiImage
{
    // One of byte[], sbyte[], short[], ushort[], int[], float[], double[]; for rgb24 a byte[] of interleaved triples.
    private readonly Array _data;

    internal NiftiImage(NiftiHeader header, Array data)
    {
        Header = header;
        DataType = header.DataType;
        _data = data;
        Shape = header.Shape;
        if (data.LongLength != VoxelCount * (DataType == NiftiDataType.Rgb24 ? 3 : 1))
            throw new ArgumentException("The voxel array does not match the header's dimensions.");
    }

    public NiftiHeader Header { get; }

    /// <summary>dim[1..dim[0]].</summary>
    public int[] Shape { get; }

    /// <summary>The stored type (fixed when read, whatever is later done to <see cref="Header"/>).</summary>
    public NiftiDataType DataType { get; }

    /// <summary>Voxel to RAS+ world in mm: the sform if sform_code &gt; 0, else the qform if qform_code &gt; 0, else pixdim on the diagonal (nifti1.h method 1).</summary>
    public Affine Affine => Header.Affine;

    public long VoxelCount => Shape.Aggregate(1L, (p, n) => p * n);

    /// <summary>Voxels per 3D volume (dims 1–3).</summary>
    public long VoxelsPerVolume => (long)Size(0) * Size(1) * Size(2);

    /// <summary>Number of 3D volumes (the product of dims 4–7; 1 for a 3D image).</summary>
    public int VolumeCount => (int)(VoxelCount / VoxelsPerVolume);

    /// <summary>For rgb24 images, the interleaved R, G, B bytes of every voxel; otherwise null.</summary>
    public byte[]? RgbBytes => DataType == NiftiDataType.Rgb24 ? (byte[])_data : null;

    private int Size(int axis) => axis < Shape.Length ? Shape[axis] : 1;

    /// <summary>
    /// The value of voxel <paramref name="index"/> (in file order) with scl_slope/scl_inter applied.
    /// For rgb24, the luminance 0.299 R + 0.587 G + 0.114 B (ITU-R BT.601 weights), unscaled.
    /// </summary>
    public double VoxelValue(long index)
    {
        // Switch on the datatype, not the array type: the runtime lets a byte[] pass as sbyte[] (and ushort[] as
        // short[]), so type patterns cannot tell them apart.
        double raw = DataType switch
        {
            NiftiDataType.Rgb24 => Rgb(index),
            NiftiDataType.UInt8 => ((byte[])_data)[index],
            NiftiDataType.Int8 => ((sbyte[])_data)[index],
            NiftiDataType.Int16 => ((short[])_data)[index],
            NiftiDataType.UInt16 => ((ushort[])_data)[index],
            NiftiDataType.Int32 => ((int[])_data)[index],
            NiftiDataType.Float32 => ((float[])_data)[index],
            NiftiDataType.Float64 => ((double[])_data)[index],
            _ => throw new InvalidOperationException("Unexpected datatype."),
        };
        return Header.Scaling is { } sc ? raw * sc.Slope + sc.Inter : raw;
    }

    private double Rgb(long index)
    {
        var b = (byte[])_data;
        return Luminance(b[3 * index], b[3 * index + 1], b[3 * index + 2]);
    }

    /// <summary>ITU-R BT.601 luma weights (common practice for grey from RGB).</summary>
    public static double Luminance(byte r, byte g, byte b) => 0.299 * r + 0.587 * g + 0.114 * b;

    /// <summary>
    /// Volume <paramref name="t"/> (0 for a 3D image) as float32 with scaling applied and this image's affine;
    /// rgb24 becomes luminance (ITU-R BT.601: 0.299 R + 0.587 G + 0.114 B). A 1D or 2D image becomes a volume one voxel thick.
    /// </summary>
    public Volume ToVolume(int t = 0)
    {
        if (t < 0 || t >= VolumeCount)
            throw new ArgumentOutOfRangeException(nameof(t), $"The image has {VolumeCount} volume(s); {t} is out of range.");
        long n = VoxelsPerVolume;
        if (n > Array.MaxLength)
            throw new InvalidOperationException($"A volume of {n} voxels is too large to hold as float32 in one array.");
        var voxels = new float[n];
        long start = t * n;
        var (slope, inter) = Header.Scaling ?? (1.0, 0.0);
        switch (DataType)
        {
            case NiftiDataType.Rgb24:
                for (long i = 0; i < n; i++) voxels[i] = (float)Rgb(start + i);
                break;
            case NiftiDataType.UInt8: Convert((byte[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.Int8: Convert((sbyte[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.Int16: Convert((short[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.UInt16: Convert((ushort[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.Int32: Convert((int[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.Float32: Convert((float[])_data, start, voxels, slope, inter); break;
            case NiftiDataType.Float64: Convert((double[])_data, start, voxels, slope, inter); break;
        }
        return new Volume(Size(0), Size(1), Size(2), Affine, voxels);
    }

    /// <summary>Smallest and largest finite value over all voxels (scaled; luminance for rgb24), or null if none is finite.</summary>
    public (double Min, double Max)? DataRange()
    {
        double min = double.PositiveInfinity, max = double.NegativeInfinity;
        for (long i = 0, n = VoxelCount; i < n; i++)
        {
            double v = VoxelValue(i);
            if (!double.IsFinite(v)) continue;
            if (v < min) min = v;
            if (v > max) max = v;
        }
        return min <= max ? (min, max) : null;
    }

    private static void Convert<T>(T[] source, long start, float[] target, double slope, double inter)
        where T : unmanaged, INumberBase<T>
    {
        var span = source.AsSpan((int)start, target.Length);
        if (slope == 1 && inter == 0)
            for (int i = 0; i < span.Length; i++) target[i] = float.CreateTruncating(span[i]);
        else
            for (int i = 0; i < span.Length; i++) target[i] = (float)(double.CreateTruncating(span[i]) * slope + inter);
    }
}
