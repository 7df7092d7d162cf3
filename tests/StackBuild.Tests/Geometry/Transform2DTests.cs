using StackBuild.Geometry;
using Xunit;

namespace StackBuild.Tests;

/// <summary>Analytic truths of the plane geometry convention (common practice: homogeneous 3×3 matrices).</summary>
public class Transform2DTests
{
    [Fact]
    public void RotationAboutCentreKeepsCentreFixed()
    {
        var r = Transform2D.Rotation(37, 10, 20);
        var (x, y) = r.Apply(10, 20);
        Assert.Equal(10, x, 9);
        Assert.Equal(20, y, 9);
        Assert.Equal(37, r.RotationDegrees, 9);
    }

    [Fact]
    public void PositiveAngleTurnsXTowardsY()
    {
        var (x, y) = Transform2D.Rotation(90).Apply(1, 0);
        Assert.Equal(0, x, 9);
        Assert.Equal(1, y, 9);
    }

    [Fact]
    public void ComposedWithInverseIsIdentity()
    {
        var t = Transform2D.Rigid(123.4, 5.5, -7.25, mirrored: true);
        Assert.True(t.Then(t.Inverse()).ApproximatelyEquals(Transform2D.Identity, 1e-12));
        Assert.True(t.Inverse().Then(t).ApproximatelyEquals(Transform2D.Identity, 1e-12));
    }

    [Fact]
    public void RigidReportsItsAngleAndMirror()
    {
        var t = Transform2D.Rigid(-75, 1, 2, mirrored: true);
        Assert.True(t.IsMirrored);
        Assert.Equal(-75, t.RotationDegrees, 9);
        var u = Transform2D.Rigid(170, 0, 0);
        Assert.False(u.IsMirrored);
        Assert.Equal(170, u.RotationDegrees, 9);
    }

    [Fact]
    public void ThenAppliesLeftFirst()
    {
        var a = Transform2D.Translation(3, 0);
        var b = Transform2D.Rotation(90);
        var (x, y) = a.Then(b).Apply(1, 0); // (1,0) → (4,0) → (0,4)
        Assert.Equal(0, x, 9);
        Assert.Equal(4, y, 9);
    }
}
