namespace StackBuild.Geometry;

/// <summary>
/// Three-letter anatomical axis codes, one letter per voxel axis (i, j, k), each naming the direction the
/// axis points towards: R/L (right/left), A/P (anterior/posterior), S/I (superior/inferior).
/// For a section series the axes are (image +x, image +y i.e. down, increasing section number); so
/// <c>RIP</c> means image right is the specimen's Right, image down is Inferior, and section numbers run
/// towards Posterior. World space is RAS+ (x to the Right, y to the Anterior, z to the Superior), as NIfTI-1
/// defines it.
/// </summary>
public readonly record struct AxisCodes
{
    public string Code { get; }

    private AxisCodes(string code) => Code = code;

    /// <summary>The default for a series: image right = Right, image down = Inferior, sections run to Posterior.</summary>
    public static AxisCodes Default => new("RIP");

    public override string ToString() => Code;

    public static bool TryParse(string? text, out AxisCodes codes, out string problem)
    {
        codes = default;
        problem = "";
        var t = (text ?? "").Trim().ToUpperInvariant();
        if (t.Length != 3)
        {
            problem = $"axis codes must be three letters from R/L, A/P, S/I (for example RIP), not '{text}'";
            return false;
        }
        var seen = new HashSet<int>();
        foreach (char ch in t)
        {
            int axis = ch switch { 'R' or 'L' => 0, 'A' or 'P' => 1, 'S' or 'I' => 2, _ => -1 };
            if (axis < 0)
            {
                problem = $"'{ch}' is not an axis letter; use R, L, A, P, S or I (for example RIP)";
                return false;
            }
            if (!seen.Add(axis))
            {
                problem = $"'{t}' names the same body axis twice; use one of R/L, one of A/P and one of S/I";
                return false;
            }
        }
        codes = new AxisCodes(t);
        return true;
    }

    public static AxisCodes Parse(string text) =>
        TryParse(text, out var c, out var problem) ? c : throw new FormatException(problem);

    /// <summary>Unit vectors in RAS+ world space for the i, j and k axes.</summary>
    public double[][] Directions()
    {
        var code = Code ?? "RIP";
        return code.Select(UnitVector).ToArray();
    }

    public static double[] UnitVector(char letter) => letter switch
    {
        'R' => [1, 0, 0], 'L' => [-1, 0, 0],
        'A' => [0, 1, 0], 'P' => [0, -1, 0],
        'S' => [0, 0, 1], 'I' => [0, 0, -1],
        _ => throw new ArgumentException($"'{letter}' is not an axis letter."),
    };

    /// <summary>
    /// The axis codes an affine's voxel axes point closest to: each voxel axis takes the world axis it has the
    /// largest share of, assigned greedily by size so no world axis is used twice (for axis-aligned or mildly
    /// oblique affines this agrees with nibabel's <c>aff2axcodes</c>).
    /// </summary>
    public static AxisCodes FromAffine(Affine a)
    {
        var cols = new double[3][];
        for (int c = 0; c < 3; c++)
        {
            double n = Math.Sqrt(a[0, c] * a[0, c] + a[1, c] * a[1, c] + a[2, c] * a[2, c]);
            cols[c] = n > 0 ? [a[0, c] / n, a[1, c] / n, a[2, c] / n] : [0, 0, 0];
        }
        var pairs = new List<(double w, int col, int world)>();
        for (int c = 0; c < 3; c++) for (int w = 0; w < 3; w++) pairs.Add((Math.Abs(cols[c][w]), c, w));
        var letters = new char[3];
        var usedCol = new bool[3];
        var usedWorld = new bool[3];
        foreach (var (_, col, world) in pairs.OrderByDescending(p => p.w))
        {
            if (usedCol[col] || usedWorld[world]) continue;
            usedCol[col] = usedWorld[world] = true;
            bool positive = cols[col][world] >= 0;
            letters[col] = world switch { 0 => positive ? 'R' : 'L', 1 => positive ? 'A' : 'P', _ => positive ? 'S' : 'I' };
        }
        return new AxisCodes(new string(letters));
    }
}
