using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Render;

/// <summary>How one section lands in the output volume.</summary>
/// <param name="ImageToPlane">Maps full-resolution input pixel coordinates to (i, j) voxel coordinates of the section's plane.</param>
/// <param name="PlaneIndex">The k index of the plane in the output volume.</param>
public sealed record PlacedSection(int PlaneIndex, Transform2D ImageToPlane);

/// <summary>Resamples sections into the planes of an output volume.</summary>
public static class StackRenderer
{
    /// <summary>
    /// Resamples <paramref name="image"/> into plane <paramref name="placement"/>.PlaneIndex of
    /// <paramref name="volume"/>. <paramref name="fullToImage"/> maps full-resolution pixel coordinates to those
    /// of <paramref name="image"/> (identity when it was loaded at full resolution). Voxels whose source falls
    /// outside the image get <paramref name="fill"/>.
    /// </summary>
    public static void RenderSection(Volume volume, PlacedSection placement, GrayImage image, Transform2D fullToImage,
        float fill, Interpolation interpolation = Interpolation.Bilinear)
    {
        var planeToImage = placement.ImageToPlane.Inverse().Then(fullToImage);
        Resampler.Warp(image, planeToImage, volume.Plane(placement.PlaneIndex), volume.Nx, volume.Ny, fill, interpolation);
    }

}
