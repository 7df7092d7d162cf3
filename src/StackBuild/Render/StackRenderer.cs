using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Render;

/// <summary>Resamples sections into the planes of an output volume.</summary>
public static class StackRenderer
{
    /// <summary>
    /// Resamples <paramref name="image"/> into plane <paramref name="planeIndex"/> (k) of <paramref name="volume"/>;
    /// <paramref name="imageToPlane"/> maps full-resolution input pixel coordinates to (i, j) voxel coordinates of that
    /// plane. <paramref name="fullToImage"/> maps full-resolution pixel coordinates to those
    /// of <paramref name="image"/> (identity when it was loaded at full resolution). Voxels whose source falls
    /// outside the image get <paramref name="fill"/>.
    /// </summary>
    public static void RenderSection(Volume volume, int planeIndex, Transform2D imageToPlane, GrayImage image, Transform2D fullToImage,
        float fill, Interpolation interpolation = Interpolation.Bilinear)
    {
        var planeToImage = imageToPlane.Inverse().Then(fullToImage);
        Resampler.Warp(image, planeToImage, volume.Plane(planeIndex), volume.Nx, volume.Ny, fill, interpolation);
    }
}
