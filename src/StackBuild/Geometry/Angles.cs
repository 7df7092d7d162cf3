namespace StackBuild.Geometry;

/// <summary>Angles in degrees.</summary>
public static class Angles
{
    /// <summary>The same angle in (−180°, 180°].</summary>
    public static double Wrap(double degrees)
    {
        degrees %= 360;
        if (degrees > 180) degrees -= 360;
        if (degrees <= -180) degrees += 360;
        return degrees;
    }
}
