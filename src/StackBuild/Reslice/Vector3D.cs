namespace StackBuild.Reslice;

/// <summary>
/// A point or direction in 3D, in world millimetres (RAS+) or in voxel indices (i, j, k), whichever the caller
/// says. Only what reslicing needs: sums, scaling, dot and cross products.
/// </summary>
public readonly record struct Vector3D(double X, double Y, double Z)
{
    public static Vector3D Zero => new(0, 0, 0);

    public static Vector3D operator +(Vector3D a, Vector3D b) => new(a.X + b.X, a.Y + b.Y, a.Z + b.Z);
    public static Vector3D operator -(Vector3D a, Vector3D b) => new(a.X - b.X, a.Y - b.Y, a.Z - b.Z);
    public static Vector3D operator -(Vector3D a) => new(-a.X, -a.Y, -a.Z);
    public static Vector3D operator *(double s, Vector3D a) => new(s * a.X, s * a.Y, s * a.Z);
    public static Vector3D operator *(Vector3D a, double s) => new(s * a.X, s * a.Y, s * a.Z);

    public double Dot(Vector3D b) => X * b.X + Y * b.Y + Z * b.Z;

    public Vector3D Cross(Vector3D b) => new(Y * b.Z - Z * b.Y, Z * b.X - X * b.Z, X * b.Y - Y * b.X);

    public double Length => Math.Sqrt(X * X + Y * Y + Z * Z);

    public Vector3D Normalized()
    {
        double n = Length;
        if (!(n > 1e-12)) throw new InvalidOperationException("A zero-length vector has no direction.");
        return new(X / n, Y / n, Z / n);
    }

    public double[] ToArray() => [X, Y, Z];

    public static implicit operator Vector3D((double X, double Y, double Z) t) => new(t.X, t.Y, t.Z);
}
