namespace StackBuild.Nifti;

/// <summary>
/// How <see cref="NiftiFile"/> writes a volume.
/// </summary>
/// <remarks>
/// Integer types and scaling (the rule): when every finite value is a whole number inside the type's range, the
/// values are stored as they are (scl_slope 1, scl_inter 0). Otherwise the finite data range [min, max] is mapped
/// linearly onto the type's full range (e.g. 0–65535 for uint16) and the map is stored in scl_slope/scl_inter, so
/// a reader recovers value = stored × scl_slope + scl_inter to within half a step (slope/2). A constant
/// non-integer volume is stored as zeros with scl_inter = the value. Not-a-number becomes the stored value
/// nearest to 0.0 (as nibabel does); +∞ and −∞ become the largest and smallest stored value.
/// Float32 is written as is (NaN kept).
/// </remarks>
public sealed record NiftiWriteOptions
{
    /// <summary>Writable: UInt8, Int16, UInt16, Float32 (default); Rgb24 via <see cref="NiftiFile.WriteRgb"/>.</summary>
    public NiftiDataType DataType { get; init; } = NiftiDataType.Float32;

    /// <summary>The unit stored in xyzt_units; with micrometres, pixdim and the qform/sform are stored in µm.</summary>
    public SpatialUnit Unit { get; init; } = SpatialUnit.Millimetre;

    /// <summary>descrip: printable ASCII, cut to 79 characters; other characters are written as '?'.</summary>
    public string Description { get; init; } = "";

    /// <summary>cal_min, the display minimum; default the data minimum.</summary>
    public double? CalMin { get; init; }

    /// <summary>cal_max, the display maximum; default the data maximum.</summary>
    public double? CalMax { get; init; }

    /// <summary>qform_code; default 1 (scanner anatomical: the specimen's own coordinates).</summary>
    public NiftiXformCode QformCode { get; init; } = NiftiXformCode.ScannerAnat;

    /// <summary>sform_code; default 1 (scanner anatomical).</summary>
    public NiftiXformCode SformCode { get; init; } = NiftiXformCode.ScannerAnat;
}

/// <summary>The scaling rule described on <see cref="NiftiWriteOptions"/>.</summary>
internal static class NiftiScaling
{
    /// <summary>Finite minimum and maximum, or (0, 0) when there is no finite value.</summary>
    public static (double Min, double Max) FiniteRange(ReadOnlySpan<float> values)
    {
        double min = double.PositiveInfinity, max = double.NegativeInfinity;
        foreach (float v in values)
        {
            if (!float.IsFinite(v)) continue;
            if (v < min) min = v;
            if (v > max) max = v;
        }
        return min > max ? (0, 0) : (min, max);
    }

    /// <summary>(scl_slope, scl_inter) as they will be stored (float32), for values going into integer type <paramref name="type"/>.</summary>
    public static (float Slope, float Inter) Choose(ReadOnlySpan<float> values, NiftiDataType type)
    {
        var (tmin, tmax) = NiftiDataTypes.IntegerRange(type);
        var (min, max) = FiniteRange(values);
        bool whole = true;
        foreach (float v in values)
            if (float.IsFinite(v) && v != MathF.Round(v)) { whole = false; break; }
        if (whole && min >= tmin && max <= tmax) return (1f, 0f);
        if (max == min) return (1f, (float)min);
        float slope = (float)((max - min) / (tmax - tmin));
        float inter = (float)(min - tmin * (double)slope);
        return (slope, inter);
    }

    /// <summary>The stored integer for one value (before conversion to the type), clamped to the type's range.</summary>
    public static double Stored(float v, double slope, double inter, double tmin, double tmax, double storedForNaN)
    {
        if (float.IsNaN(v)) return storedForNaN;
        double s = Math.Round((v - inter) / slope, MidpointRounding.AwayFromZero);
        return Math.Clamp(s, tmin, tmax);
    }

    /// <summary>The stored value whose scaled value is nearest 0.0.</summary>
    public static double StoredForNaN(double slope, double inter, double tmin, double tmax) =>
        Math.Clamp(Math.Round(-inter / slope, MidpointRounding.AwayFromZero), tmin, tmax);
}
