using StackBuild.Geometry;

namespace StackBuild.Nifti;

/// <summary>
/// The qform ("METHOD 2" of nifti1.h): a rotation held as the quaternion (a, b, c, d) with a ≥ 0 and only
/// b, c, d stored, a handedness factor qfac = pixdim[0] = ±1 applied to the third axis, voxel sizes
/// pixdim[1..3], and the offset qoffset_x/y/z:
/// <c>[x y z]ᵀ = R · [pixdim1·i, pixdim2·j, qfac·pixdim3·k]ᵀ + qoffset</c>.
/// The conversions follow the reference NIfTI-1 library, nifti1_io.c (<c>nifti_quatern_to_mat44</c> and
/// <c>nifti_mat44_to_quatern</c>), written here from the formulas in nifti1.h's comments and that library
/// as remembered; the tests check them against nibabel and against the sform.
/// </summary>
internal static class NiftiQuaternion
{
    /// <summary>The affine a qform describes (nifti_quatern_to_mat44). Non-positive voxel sizes are read as 1, and a qfac other than −1 as +1, as the reference library does.</summary>
    public static Affine ToAffine(double b, double c, double d, double qx, double qy, double qz,
        double dx, double dy, double dz, double qfac)
    {
        double a = 1.0 - (b * b + c * c + d * d);
        if (a < 1e-7)
        {
            // Not quite a unit quaternion: normalise (b, c, d) and take a 180° rotation, as nifti1_io.c does.
            a = 1.0 / Math.Sqrt(b * b + c * c + d * d);
            b *= a; c *= a; d *= a;
            a = 0;
        }
        else
        {
            a = Math.Sqrt(a);
        }
        double xd = dx > 0 ? dx : 1, yd = dy > 0 ? dy : 1, zd = dz > 0 ? dz : 1;
        if (qfac < 0) zd = -zd;
        return Affine.FromRows(
            [(a * a + b * b - c * c - d * d) * xd, 2 * (b * c - a * d) * yd, 2 * (b * d + a * c) * zd, qx],
            [2 * (b * c + a * d) * xd, (a * a + c * c - b * b - d * d) * yd, 2 * (c * d - a * b) * zd, qy],
            [2 * (b * d - a * c) * xd, 2 * (c * d + a * b) * yd, (a * a + d * d - c * c - b * b) * zd, qz]);
    }

    /// <summary>
    /// The qform closest to an affine (nifti_mat44_to_quatern): voxel sizes are the column norms; the
    /// normalised columns are made exactly orthogonal by polar decomposition (so a sheared affine gets the
    /// nearest rotation); a left-handed affine (negative determinant) gets qfac = −1 and its third column negated.
    /// </summary>
    public static (double B, double C, double D, double Qfac, double Dx, double Dy, double Dz) FromAffine(Affine m)
    {
        var (dx, dy, dz) = m.VoxelSizes;
        if (dx == 0 || dy == 0 || dz == 0)
            throw new ArgumentException("The affine has a zero-length voxel axis; it cannot be written as a qform.");
        var p = new double[3, 3];
        double[] sizes = [dx, dy, dz];
        for (int r = 0; r < 3; r++) for (int col = 0; col < 3; col++) p[r, col] = m[r, col] / sizes[col];
        var q = Polar(p);

        double det = Det(q);
        double qfac = 1;
        if (det <= 0)
        {
            qfac = -1;
            q[0, 2] = -q[0, 2]; q[1, 2] = -q[1, 2]; q[2, 2] = -q[2, 2];
        }

        double r11 = q[0, 0], r12 = q[0, 1], r13 = q[0, 2];
        double r21 = q[1, 0], r22 = q[1, 1], r23 = q[1, 2];
        double r31 = q[2, 0], r32 = q[2, 1], r33 = q[2, 2];
        double a = r11 + r22 + r33 + 1.0, b, c, d;
        if (a > 0.5)
        {
            a = 0.5 * Math.Sqrt(a);
            b = 0.25 * (r32 - r23) / a;
            c = 0.25 * (r13 - r31) / a;
            d = 0.25 * (r21 - r12) / a;
        }
        else
        {
            double xd = 1.0 + r11 - (r22 + r33), yd = 1.0 + r22 - (r11 + r33), zd = 1.0 + r33 - (r11 + r22);
            if (xd > 1.0)
            {
                b = 0.5 * Math.Sqrt(xd);
                c = 0.25 * (r12 + r21) / b;
                d = 0.25 * (r13 + r31) / b;
                a = 0.25 * (r32 - r23) / b;
            }
            else if (yd > 1.0)
            {
                c = 0.5 * Math.Sqrt(yd);
                b = 0.25 * (r12 + r21) / c;
                d = 0.25 * (r23 + r32) / c;
                a = 0.25 * (r13 - r31) / c;
            }
            else
            {
                d = 0.5 * Math.Sqrt(zd);
                b = 0.25 * (r13 + r31) / d;
                c = 0.25 * (r23 + r32) / d;
                a = 0.25 * (r21 - r12) / d;
            }
            // The standard keeps a ≥ 0 (only b, c, d are stored).
            if (a < 0) { b = -b; c = -c; d = -d; }
        }
        return (b, c, d, qfac, dx, dy, dz);
    }

    /// <summary>
    /// (b, c, d) rounded to float32 for the header. For a half turn (a = 0, which axis codes such as LIP or RSA give)
    /// plain rounding can leave b² + c² + d² just below 1; a reader that then computes a = √(1 − b² − c² − d²) in
    /// float32 (nibabel 5.0 does) finds a ≈ 2·10⁻⁴ and turns the axes by that much. Nudging the largest component
    /// away from zero by one float step until the sum is at or just above 1 is read as a = 0 both by nifti1_io.c
    /// (a &lt; 1e-7 → 0, then renormalised) and by nibabel (a sum within 3 float steps above 1 → 0), as measured in
    /// NiftiNibabelTests.
    /// </summary>
    public static (float B, float C, float D) Stored(double b, double c, double d)
    {
        float[] v = [(float)b, (float)c, (float)d];
        if (1.0 - (b * b + c * c + d * d) > 1e-12) return (v[0], v[1], v[2]);
        for (int step = 0; step < 4 && !(SumFloat(v) >= 1f && SumDouble(v) >= 1.0); step++)
        {
            int k = 0;
            for (int i = 1; i < 3; i++) if (Math.Abs(v[i]) > Math.Abs(v[k])) k = i;
            v[k] = v[k] >= 0 ? MathF.BitIncrement(v[k]) : MathF.BitDecrement(v[k]);
        }
        return (v[0], v[1], v[2]);
    }

    private static float SumFloat(float[] v) => v[0] * v[0] + v[1] * v[1] + v[2] * v[2];

    private static double SumDouble(float[] v) => (double)v[0] * v[0] + (double)v[1] * v[1] + (double)v[2] * v[2];

    /// <summary>The orthogonal factor of the polar decomposition, by Newton's iteration X ← (X + X⁻ᵀ)/2 (common practice).</summary>
    private static double[,] Polar(double[,] m)
    {
        var x = (double[,])m.Clone();
        for (int iteration = 0; iteration < 100; iteration++)
        {
            var inv = Inverse(x);
            double change = 0;
            var next = new double[3, 3];
            for (int r = 0; r < 3; r++)
            for (int c = 0; c < 3; c++)
            {
                next[r, c] = 0.5 * (x[r, c] + inv[c, r]);
                change += Math.Abs(next[r, c] - x[r, c]);
            }
            x = next;
            if (change < 1e-15) break;
        }
        return x;
    }

    private static double Det(double[,] m) =>
        m[0, 0] * (m[1, 1] * m[2, 2] - m[1, 2] * m[2, 1])
        - m[0, 1] * (m[1, 0] * m[2, 2] - m[1, 2] * m[2, 0])
        + m[0, 2] * (m[1, 0] * m[2, 1] - m[1, 1] * m[2, 0]);

    private static double[,] Inverse(double[,] m)
    {
        double det = Det(m);
        if (Math.Abs(det) < 1e-12)
            throw new ArgumentException("The affine's voxel axes are (nearly) parallel; it cannot be written as a qform.");
        return new double[3, 3]
        {
            { (m[1, 1] * m[2, 2] - m[1, 2] * m[2, 1]) / det, (m[0, 2] * m[2, 1] - m[0, 1] * m[2, 2]) / det, (m[0, 1] * m[1, 2] - m[0, 2] * m[1, 1]) / det },
            { (m[1, 2] * m[2, 0] - m[1, 0] * m[2, 2]) / det, (m[0, 0] * m[2, 2] - m[0, 2] * m[2, 0]) / det, (m[0, 2] * m[1, 0] - m[0, 0] * m[1, 2]) / det },
            { (m[1, 0] * m[2, 1] - m[1, 1] * m[2, 0]) / det, (m[0, 1] * m[2, 0] - m[0, 0] * m[2, 1]) / det, (m[0, 0] * m[1, 1] - m[0, 1] * m[1, 0]) / det },
        };
    }
}
