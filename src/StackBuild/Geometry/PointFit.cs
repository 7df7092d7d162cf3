namespace StackBuild.Geometry;

/// <summary>Least-squares maps between matched 2D point sets.</summary>
public static class PointFit
{
    /// <summary>
    /// The map dst ≈ s·R·src + t, with R a rotation, or a rotation after a mirror about x when <paramref name="mirrored"/>
    /// (Umeyama 1991, IEEE TPAMI 13:376, restricted to 2D). <paramref name="withScale"/> false fixes s = 1 (a rigid map;
    /// the rotation and shift are the same least-squares answer, 2D Procrustes).
    /// </summary>
    public static Transform2D Fit(IReadOnlyList<(double X, double Y)> src, IReadOnlyList<(double X, double Y)> dst, bool mirrored, bool withScale)
    {
        var s = mirrored ? src.Select(p => (X: -p.X, p.Y)).ToList() : src.ToList();
        double mx = s.Average(p => p.X), my = s.Average(p => p.Y);
        double nx = dst.Average(p => p.X), ny = dst.Average(p => p.Y);
        double a = 0, b = 0, varS = 0;
        for (int i = 0; i < s.Count; i++)
        {
            double x = s[i].X - mx, y = s[i].Y - my, u = dst[i].X - nx, v = dst[i].Y - ny;
            a += x * u + y * v;       // cos part
            b += x * v - y * u;       // sin part
            varS += x * x + y * y;
        }
        double angle = Math.Atan2(b, a);
        double scale = withScale && varS > 0 ? Math.Sqrt(a * a + b * b) / varS : 1;
        double c = scale * Math.Cos(angle), sn = scale * Math.Sin(angle);
        var rs = new Transform2D(c, -sn, nx - (c * mx - sn * my), sn, c, ny - (sn * mx + c * my));
        return mirrored ? Transform2D.MirrorX().Then(rs) : rs;
    }
}
