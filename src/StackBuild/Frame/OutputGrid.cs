using System.Globalization;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Series;
using StackBuild.Template;

namespace StackBuild.Frame;

/// <summary>A section's tissue: a mask over an image, and the map from that image's pixels to the section's working pixels.</summary>
public sealed record SectionTissue(bool[] Mask, int Width, int Height, Transform2D MaskToWork);

/// <summary>One placed section as the grid sees it.</summary>
/// <param name="FullToWork">Full-resolution input pixels → the section's working pixels.</param>
/// <param name="WorkToFrame">The section's working pixels → the frame (working scale).</param>
/// <param name="FullWidth">Full-resolution image width.</param>
/// <param name="FullHeight">Full-resolution image height.</param>
/// <param name="Tissue">The section's tissue, when it was found (aligned builds).</param>
public sealed record GridSection(Transform2D FullToWork, Transform2D WorkToFrame, int FullWidth, int FullHeight, SectionTissue? Tissue);

/// <summary>How the frame lies on a template: the volume's affine is the template's.</summary>
/// <param name="PlaneToWork">Template plane pixels → frame working pixels.</param>
/// <param name="FirstPlane">Template plane (fractional) of the series' first section.</param>
/// <param name="Direction">+1, or −1 when section numbers run towards lower template planes.</param>
/// <param name="OnTemplateVoxels">True: the grid's voxel centres fall on the template's (--template-grid).</param>
public sealed record TemplateLattice(TemplateVolume Template, Transform2D PlaneToWork, double FirstPlane, double Direction, bool OnTemplateVoxels);

/// <summary>What the output grid is cut from.</summary>
/// <param name="Placed">Every placed section.</param>
/// <param name="WorkPixelUm">Size of a working (registration) pixel, µm.</param>
/// <param name="OutputPixelUm">In-plane voxel size of the output, µm.</param>
/// <param name="Aligned">False for sections placed as scanned (no tissue to crop to is then not worth a warning).</param>
/// <param name="Input">The series, named in problems.</param>
public sealed record GridRequest(IReadOnlyList<GridSection> Placed, double WorkPixelUm, double OutputPixelUm, FrameOptions Frame, AxisCodes Axes,
    SectionSeries Series, TemplateLattice? Template, bool Aligned, string Input);

/// <summary>
/// The output grid: the frame at the output voxel size, cropped to the tissue of every placed section plus a margin
/// (or holding every whole image), one plane per section position, and its affine.
/// </summary>
/// <param name="WorkToOut">Frame working pixels → frame output pixels.</param>
/// <param name="ToGrid">Frame output pixels → the grid's (i, j).</param>
/// <param name="MinX">Left edge of the grid, frame output pixels.</param>
/// <param name="MinY">Top edge of the grid, frame output pixels.</param>
/// <param name="TissueBox">The tissue's box in frame output pixels (empty when none was found).</param>
/// <param name="Cropped">True when the grid was cropped to the tissue.</param>
/// <param name="PlaneOf">Section number → plane index k (at the section spacing).</param>
/// <param name="TissueCentreMm">World position (RAS+ mm) of the tissue's centre.</param>
public sealed record OutputGrid(int Nx, int Ny, int Nz, Transform2D WorkToOut, Transform2D ToGrid, double MinX, double MinY, PlaneBox TissueBox,
    bool Cropped, IReadOnlyDictionary<int, int> PlaneOf, Affine Affine, (double X, double Y, double Z) TissueCentreMm, IReadOnlyList<string> Warnings)
{
    /// <summary>A smallest size (µm) for a refusal's advice, rounded up to 0.001 µm so that the size shown is itself accepted.</summary>
    public static string RoundedUpUm(double um) => (Math.Ceiling(um * 1000 * (1 + 1e-12)) / 1000).ToString("0.###", CultureInfo.InvariantCulture);

    /// <summary>
    /// Cuts the grid and builds its affine: the tissue's centre (middle of its box in the plane, middle of the stack)
    /// goes to the stated world position; with a template, every voxel goes where the template says. Refuses a grid
    /// with too many planes or voxels.
    /// </summary>
    public static OutputGrid Cut(GridRequest request)
    {
        var frame = request.Frame;
        var series = request.Series;
        double outUm = request.OutputPixelUm;
        var warnings = new List<string>();
        var workToOut = Resampler.EdgeAlignedScale(request.WorkPixelUm / outUm);
        var canvasBox = PlaneBox.Empty;
        var tissueBox = PlaneBox.Empty;
        foreach (var section in request.Placed)
        {
            var map = section.FullToWork.Then(section.WorkToFrame).Then(workToOut);
            foreach (var (x, y) in new[] { (-0.5, -0.5), (section.FullWidth - 0.5, -0.5), (-0.5, section.FullHeight - 0.5), (section.FullWidth - 0.5, section.FullHeight - 0.5) })
            {
                var p = map.Apply(x, y);
                canvasBox = canvasBox.Including(p.X, p.Y);
            }
            if (section.Tissue is { } tissue)
            {
                var mask = OutputFrame.WithoutSpecks(tissue.Mask, tissue.Width, tissue.Height);
                var box = OutputFrame.TissueBox(mask, tissue.Width, tissue.Height, tissue.MaskToWork.Then(section.WorkToFrame).Then(workToOut));
                if (!box.IsEmpty) tissueBox = tissueBox.Including(box.MinX, box.MinY).Including(box.MaxX, box.MaxY);
            }
        }
        bool cropped = frame.CropToTissue && !tissueBox.IsEmpty;
        if (frame.CropToTissue && tissueBox.IsEmpty && request.Aligned)
            warnings.Add("no tissue was found to crop to; the grid holds every section's whole image");
        var gridBox = cropped ? tissueBox.Grown(frame.MarginUm / outUm).Intersect(canvasBox) : canvasBox;
        double minX = gridBox.MinX, minY = gridBox.MinY;
        if (request.Template is { OnTemplateVoxels: true } lattice)
        {
            // The template's own lattice: the grid's voxel centres fall on template voxel centres (x_plane = a·x + b per axis).
            var outToPlane = workToOut.Inverse().Then(lattice.PlaneToWork.Inverse());
            minX = (Math.Floor(outToPlane.M00 * (minX + 0.5) + outToPlane.M02 + 1e-9) - outToPlane.M02) / outToPlane.M00 - 0.5;
            minY = (Math.Floor(outToPlane.M11 * (minY + 0.5) + outToPlane.M12 + 1e-9) - outToPlane.M12) / outToPlane.M11 - 0.5;
        }
        int nx = Math.Max(1, (int)Math.Ceiling(gridBox.MaxX - minX - 1e-9));
        int ny = Math.Max(1, (int)Math.Ceiling(gridBox.MaxY - minY - 1e-9));
        var toGrid = Transform2D.Translation(-minX - 0.5, -minY - 0.5);
        double firstPosition = series.Sections[0].PositionUm;
        double lastPlane = series.Sections.Max(s => Math.Round((s.PositionUm - firstPosition) / series.SpacingUm));
        if (!(lastPlane < Volume.MaxPlanes))
            throw new InputProblemException(request.Input,
                $"the section positions span {lastPlane + 1:0} planes at {series.SpacingUm} µm spacing, more than {Volume.MaxPlanes}",
                "check the position_um column and the spacing (both in µm)");
        var planeOf = series.Sections.ToDictionary(s => s.Number, s => (int)Math.Round((s.PositionUm - firstPosition) / series.SpacingUm));
        int nz = planeOf.Values.Max() + 1;
        if (nx > NiftiFile.MaxVoxelsPerAxis || ny > NiftiFile.MaxVoxelsPerAxis)
            throw new InputProblemException(request.Input,
                $"the output would be {nx}×{ny} voxels across, more than NIfTI-1 stores ({NiftiFile.MaxVoxelsPerAxis} per axis)",
                $"choose a coarser --output-pixel-size (at least {RoundedUpUm(outUm * Math.Max(nx, ny) / NiftiFile.MaxVoxelsPerAxis)} µm)");
        if ((long)nx * ny * nz > Array.MaxLength)
            throw new InputProblemException(request.Input, $"the output would have {nx}×{ny}×{nz} voxels, more than fits in memory",
                "choose a coarser --output-pixel-size");

        var centreBox = tissueBox.IsEmpty ? gridBox : tissueBox;
        var tissueCentre = (I: centreBox.CentreX - minX - 0.5, J: centreBox.CentreY - minY - 0.5, K: (nz - 1) / 2.0);
        Affine affine;
        if (request.Template is { } t)
        {
            var gridToPlane = Transform2D.Translation(minX + 0.5, minY + 0.5).Then(workToOut.Inverse()).Then(t.PlaneToWork.Inverse());
            double dz = t.Direction * series.SpacingUm / 1000 / t.Template.PlaneSpacingMm;
            affine = Affine.FromRows([gridToPlane.M00, gridToPlane.M01, 0, gridToPlane.M02], [gridToPlane.M10, gridToPlane.M11, 0, gridToPlane.M12],
                [0, 0, dz, t.FirstPlane]).Then(t.Template.VoxelToWorld);
        }
        else
            affine = OutputFrame.PlacePointAt(
                Affine.FromAxes(request.Axes, outUm / 1000, outUm / 1000, series.SpacingUm / 1000, nx, ny, nz), tissueCentre, frame.CentreMm);
        var tissueCentreWorld = affine.Apply(tissueCentre.I, tissueCentre.J, tissueCentre.K);
        return new OutputGrid(nx, ny, nz, workToOut, toGrid, minX, minY, tissueBox, cropped, planeOf, affine,
            (tissueCentreWorld.X, tissueCentreWorld.Y, tissueCentreWorld.Z), warnings);
    }

    /// <summary>Full-resolution input pixels of a section → the grid's (i, j), through its working pixels and the frame.</summary>
    public Transform2D ImageToPlane(Transform2D fullToWork, Transform2D workToFrame) => fullToWork.Then(workToFrame).Then(WorkToOut).Then(ToGrid);

    /// <summary>The tissue's box in voxel coordinates: i min, j min, i max, j max (pixel edges); null when none was found.</summary>
    public double[]? TissueBoxVoxels => TissueBox.IsEmpty ? null
        : [TissueBox.MinX - MinX - 0.5, TissueBox.MinY - MinY - 0.5, TissueBox.MaxX - MinX - 0.5, TissueBox.MaxY - MinY - 0.5];
}
