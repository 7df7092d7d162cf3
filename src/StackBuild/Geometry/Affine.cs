namespace StackBuild.Geometry;

/// <summary>
/// A 4×4 affine from voxel indices (i, j, k) to world coordinates in RAS+ millimetres, as NIfTI-1's sform
/// holds it. This is the single truth about where voxels are; voxel sizes and axis codes are derived from it.
/// </summary>
public sealed class Affine
{
    private readonly double[] _m; // row-major 3×4 (last row is 0 0 0 1)

    public Affine(double[,] m)
    {
        if (m.GetLength(0) < 3 || m.GetLength(1) != 4) throw new ArgumentException("An affine needs 3 or 4 rows of 4 values.");
        _m = new double[12];
        for (int r = 0; r < 3; r++) for (int c = 0; c < 4; c++) _m[r * 4 + c] = m[r, c];
    }

    private Affine(double[] rowMajor12) => _m = rowMajor12;

    public double this[int row, int col] => row == 3 ? (col == 3 ? 1 : 0) : _m[row * 4 + col];

    public static Affine Identity => FromRows([1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0]);

    public static Affine FromRows(double[] r0, double[] r1, double[] r2) =>
        new([.. r0, .. r1, .. r2]);

    /// <summary>
    /// The affine for a volume whose voxel axes (i, j, k) point along <paramref name="axes"/> with the given
    /// voxel sizes in mm, placed so that the volume's centre sits at <paramref name="centreMm"/> (default the
    /// world origin).
    /// </summary>
    public static Affine FromAxes(AxisCodes axes, double sizeI, double sizeJ, double sizeK, int ni, int nj, int nk,
        (double X, double Y, double Z)? centreMm = null)
    {
        var d = axes.Directions();
        double[] sizes = [sizeI, sizeJ, sizeK];
        var m = new double[12];
        for (int c = 0; c < 3; c++) for (int r = 0; r < 3; r++) m[r * 4 + c] = d[c][r] * sizes[c];
        var centre = centreMm ?? (0, 0, 0);
        double[] half = [(ni - 1) / 2.0, (nj - 1) / 2.0, (nk - 1) / 2.0];
        double[] world = [centre.X, centre.Y, centre.Z];
        for (int r = 0; r < 3; r++)
            m[r * 4 + 3] = world[r] - (m[r * 4] * half[0] + m[r * 4 + 1] * half[1] + m[r * 4 + 2] * half[2]);
        return new Affine(m);
    }

    public (double X, double Y, double Z) Apply(double i, double j, double k) => (
        _m[0] * i + _m[1] * j + _m[2] * k + _m[3],
        _m[4] * i + _m[5] * j + _m[6] * k + _m[7],
        _m[8] * i + _m[9] * j + _m[10] * k + _m[11]);

    /// <summary>Length of each voxel axis in mm (the column norms).</summary>
    public (double I, double J, double K) VoxelSizes => (ColumnNorm(0), ColumnNorm(1), ColumnNorm(2));

    private double ColumnNorm(int c) => Math.Sqrt(_m[c] * _m[c] + _m[4 + c] * _m[4 + c] + _m[8 + c] * _m[8 + c]);

    public double Determinant3 =>
        _m[0] * (_m[5] * _m[10] - _m[6] * _m[9]) - _m[1] * (_m[4] * _m[10] - _m[6] * _m[8]) + _m[2] * (_m[4] * _m[9] - _m[5] * _m[8]);

    public Affine Inverse()
    {
        double det = Determinant3;
        if (Math.Abs(det) < 1e-300) throw new InvalidOperationException("The affine is singular.");
        double a = _m[0], b = _m[1], c = _m[2], d = _m[4], e = _m[5], f = _m[6], g = _m[8], h = _m[9], k = _m[10];
        double[] inv =
        [
            (e * k - f * h) / det, (c * h - b * k) / det, (b * f - c * e) / det, 0,
            (f * g - d * k) / det, (a * k - c * g) / det, (c * d - a * f) / det, 0,
            (d * h - e * g) / det, (b * g - a * h) / det, (a * e - b * d) / det, 0,
        ];
        for (int r = 0; r < 3; r++)
            inv[r * 4 + 3] = -(inv[r * 4] * _m[3] + inv[r * 4 + 1] * _m[7] + inv[r * 4 + 2] * _m[11]);
        return new Affine(inv);
    }

    /// <summary>This affine followed by <paramref name="after"/> (world = after(this(v))).</summary>
    public Affine Then(Affine after)
    {
        var r = new double[12];
        for (int row = 0; row < 3; row++)
        for (int col = 0; col < 4; col++)
        {
            double s = col == 3 ? after[row, 3] : 0;
            for (int t = 0; t < 3; t++) s += after[row, t] * this[t, col];
            r[row * 4 + col] = s;
        }
        return new Affine(r);
    }

    /// <summary>Row-major 4×4 matrix, for JSON.</summary>
    public double[][] ToRows() =>
        [[_m[0], _m[1], _m[2], _m[3]], [_m[4], _m[5], _m[6], _m[7]], [_m[8], _m[9], _m[10], _m[11]], [0, 0, 0, 1]];

    public double[,] ToArray()
    {
        var a = new double[4, 4];
        for (int r = 0; r < 4; r++) for (int c = 0; c < 4; c++) a[r, c] = this[r, c];
        return a;
    }

    public AxisCodes AxisCodes => AxisCodes.FromAffine(this);

    public bool ApproximatelyEquals(Affine other, double tolerance)
    {
        for (int i = 0; i < 12; i++) if (Math.Abs(_m[i] - other._m[i]) > tolerance) return false;
        return true;
    }
}
