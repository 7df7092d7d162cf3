using StackBuild.Imaging;

namespace StackBuild.Reslice;

/// <summary>How a <see cref="ResliceSource"/> holds its voxel values.</summary>
public enum VoxelStorage
{
    /// <summary>The volume's own 32-bit floats (no copy).</summary>
    Float,
    /// <summary>A copy as bytes: every value was a whole number 0–255.</summary>
    Byte,
    /// <summary>A copy as 16-bit unsigned integers: every value was a whole number 0–65535.</summary>
    UInt16,
    /// <summary>A copy as 16-bit signed integers: every value was a whole number −32768–32767.</summary>
    Int16,
}

/// <summary>
/// A volume prepared for repeated reslicing (the viewer, benchmarks). Reslicing is limited by memory traffic
/// rather than arithmetic, so when every voxel value is a whole number that fits in 8 or 16 bits (scanned
/// histology is usually 8-bit) the values are copied into that narrower type: the same values, exactly, in a
/// quarter or half of the memory. Otherwise the volume's floats are used as they are.
/// </summary>
public sealed class ResliceSource
{
    public Volume Volume { get; }
    public VoxelStorage Storage { get; }
    internal byte[]? Bytes { get; }
    internal ushort[]? UInt16s { get; }
    internal short[]? Int16s { get; }

    private ResliceSource(Volume volume, VoxelStorage storage, byte[]? bytes = null, ushort[]? uint16s = null, short[]? int16s = null)
    {
        Volume = volume;
        Storage = storage;
        Bytes = bytes;
        UInt16s = uint16s;
        Int16s = int16s;
    }

    /// <summary>Uses the volume's floats directly (nothing is scanned or copied).</summary>
    public static ResliceSource Direct(Volume volume) => new(volume, VoxelStorage.Float);

    /// <summary>
    /// Scans the volume once and keeps a narrower exact copy when the values allow one (see the class remarks).
    /// Later changes to the volume's voxels are not seen by the copy.
    /// </summary>
    public static ResliceSource Compact(Volume volume)
    {
        var v = volume.Voxels;
        float min = float.PositiveInfinity, max = float.NegativeInfinity;
        foreach (float x in v)
        {
            // A NaN, infinity or fraction rules out every integer type.
            if (x != MathF.Floor(x)) return Direct(volume);
            if (x < min) min = x;
            if (x > max) max = x;
        }
        if (min >= 0 && max <= byte.MaxValue)
        {
            var bytes = GC.AllocateUninitializedArray<byte>(v.Length);
            for (int i = 0; i < v.Length; i++) bytes[i] = (byte)v[i];
            return new(volume, VoxelStorage.Byte, bytes: bytes);
        }
        if (min >= 0 && max <= ushort.MaxValue)
        {
            var words = GC.AllocateUninitializedArray<ushort>(v.Length);
            for (int i = 0; i < v.Length; i++) words[i] = (ushort)v[i];
            return new(volume, VoxelStorage.UInt16, uint16s: words);
        }
        if (min >= short.MinValue && max <= short.MaxValue)
        {
            var words = GC.AllocateUninitializedArray<short>(v.Length);
            for (int i = 0; i < v.Length; i++) words[i] = (short)v[i];
            return new(volume, VoxelStorage.Int16, int16s: words);
        }
        return Direct(volume);
    }
}
