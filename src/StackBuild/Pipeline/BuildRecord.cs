using System.Text.Json.Serialization;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>What became of a section in the volume (the sidecar's <c>status</c>).</summary>
public enum SectionOutcome
{
    /// <summary>Rendered as scanned, centred, not aligned (<c>placed</c>).</summary>
    Placed,
    /// <summary>Rendered where the alignment put it (<c>aligned</c>).</summary>
    Aligned,
    /// <summary>No image: a lost section (<c>gap</c>).</summary>
    Gap,
    /// <summary>Left out by the manifest (<c>excluded</c>).</summary>
    Excluded,
    /// <summary>No confident match with a neighbour: its plane holds no image of its own (<c>failed</c>).</summary>
    Failed,
}

/// <summary>What happened to one section, as written to the sidecar.</summary>
/// <remarks>
/// <see cref="Matrix"/> is the 3×3 row-major matrix that maps pixel coordinates of the input image (x right,
/// y down, origin at the centre of the top-left pixel, full-resolution input pixels) to (i, j) voxel
/// coordinates of the section's plane (index <see cref="ZIndex"/>) in the output volume.
/// </remarks>
public sealed record SectionRecord
{
    [JsonPropertyName("number")] public int Number { get; init; }
    [JsonPropertyName("file")] public string? File { get; init; }
    /// <summary>placed (unaligned), aligned, gap, excluded or failed.</summary>
    [JsonPropertyName("status"), JsonConverter(typeof(SidecarWords.StatusConverter))] public SectionOutcome Status { get; init; }
    [JsonPropertyName("mirrored")] public bool? Mirrored { get; init; }
    [JsonPropertyName("rotation_deg")] public double? RotationDegrees { get; init; }
    [JsonPropertyName("shift_px")] public double[]? ShiftPx { get; init; }
    /// <summary>Confidence in [0, 1] of the pairwise registration that placed the section (see the registration's documentation).</summary>
    [JsonPropertyName("confidence")] public double? Confidence { get; init; }
    [JsonPropertyName("ncc")] public double? Ncc { get; init; }
    [JsonPropertyName("peak_to_sidelobe")] public double? PeakToSidelobe { get; init; }
    /// <summary>The section it was registered to; <see cref="Route"/> says which neighbour that was.</summary>
    [JsonPropertyName("registered_to")] public int? RegisteredTo { get; init; }
    /// <summary>reference, neighbour, second-neighbour, distant, failed, template (no confident neighbour match; placed by its own template match), or part-reference (see <see cref="Part"/>).</summary>
    [JsonPropertyName("route"), JsonConverter(typeof(SidecarWords.RouteConverter))] public LinkRoute? Route { get; init; }
    /// <summary>
    /// Set when the section lies in a stretch of the stack whose place relative to the rest is uncertain: the number of that
    /// part of the chain (1, 2, … for a stretch nothing linked to the reference, whose own reference has route part-reference;
    /// 0 for the reference's own part when, without a template, another part joined to it is larger and is taken as the stack).
    /// </summary>
    [JsonPropertyName("part")] public int? Part { get; init; }
    /// <summary>
    /// Without a template, the one match across the break that places the section's part relative to the rest (the part's
    /// best, however weak; for part 0, the match that placed the larger part); null when the section's place is not uncertain and in template builds.
    /// </summary>
    [JsonPropertyName("part_joined_by")] public PartJoinRecord? PartJoinedBy { get; init; }
    /// <summary>How far apart (µm, mean over the corners) the placements through the first and second neighbour are.</summary>
    [JsonPropertyName("route_disagreement_um")] public double? RouteDisagreementUm { get; init; }
    /// <summary>The best clearly different hypothesis (other mirror or a rotation over 10° away), for close calls.</summary>
    [JsonPropertyName("runner_up")] public HypothesisRecord? RunnerUp { get; init; }
    /// <summary>The section's plane at the section spacing (sections numbered by position); the volume's own plane index unless --voxel-size resampled it (then see <see cref="VolumeZ"/>).</summary>
    [JsonPropertyName("z_index")] public int ZIndex { get; init; }
    /// <summary>With --voxel-size: where the section lies along the resampled volume's k axis (fractional plane index).</summary>
    [JsonPropertyName("volume_z")] public double? VolumeZ { get; init; }
    [JsonPropertyName("position_um")] public double PositionUm { get; init; }
    [JsonPropertyName("pixel_size_um")] public double? PixelSizeUm { get; init; }
    /// <summary>Width and height (pixels) of the image the build read; with <see cref="PixelSizeUm"/>, the field it shows (apply checks another set against it).</summary>
    [JsonPropertyName("image_size_px")] public int[]? ImageSizePx { get; init; }
    [JsonPropertyName("damaged")] public bool Damaged { get; init; }
    [JsonPropertyName("matrix")] public double[][]? Matrix { get; init; }
    [JsonPropertyName("note")] public string? Note { get; init; }
    /// <summary>With --template: how the section matched its template slice and how far the template moved it.</summary>
    [JsonPropertyName("template")] public SectionTemplateRecord? Template { get; init; }
    /// <summary>How far (µm, at the section's centre) the smoothing prior moved the section from its chain placement; null when the prior was off.</summary>
    [JsonPropertyName("drift_correction_um")] public double? DriftCorrectionUm { get; init; }
    /// <summary>Every pairwise registration the smoothing prior used with this section, with its weight and any outlier flag.</summary>
    [JsonPropertyName("pairs")] public List<PairLinkRecord>? Pairs { get; init; }
    /// <summary>For a gap, excluded or failed plane filled from its neighbours: "flow" or "linear"; null when left empty.</summary>
    [JsonPropertyName("filled")] public string? Filled { get; init; }
    /// <summary>The two placed sections the fill was interpolated between.</summary>
    [JsonPropertyName("filled_from")] public int[]? FilledFrom { get; init; }
    /// <summary>Estimated placement error (µm, one standard error) relative to the reference section; see <see cref="Evaluate.Uncertainty"/>.</summary>
    [JsonPropertyName("estimated_error_um")] public double? EstimatedErrorUm { get; init; }
    /// <summary>
    /// How much the stack's weighted agreement (NCC summed over the pairs within three sections) would drop if this section
    /// alone were turned over; near 0 the stack cannot tell which side is up (see <see cref="Solve.MirrorParity"/>).
    /// </summary>
    [JsonPropertyName("side_margin")] public double? SideMargin { get; init; }
    /// <summary>Why the section deserves a look (plain sentences, the report's flags); empty when there is no reason.</summary>
    [JsonPropertyName("flags")] public List<string>? Flags { get; init; }
    /// <summary>NCC with the section it was registered to before alignment (both registration images centred, as mounted); compare with <see cref="Ncc"/>.</summary>
    [JsonPropertyName("ncc_before")] public double? NccBefore { get; init; }
    /// <summary>With the global solve: the rotation the neighbour chain gave, before drift correction.</summary>
    [JsonPropertyName("chain_rotation_deg")] public double? ChainRotationDegrees { get; init; }
    /// <summary>With the global solve: the shift the neighbour chain gave, before drift correction.</summary>
    [JsonPropertyName("chain_shift_px")] public double[]? ChainShiftPx { get; init; }
}

/// <summary>One pairwise registration as the smoothing prior weighed it.</summary>
public sealed record PairLinkRecord
{
    /// <summary>The other section of the pair.</summary>
    [JsonPropertyName("with")] public int With { get; init; }
    [JsonPropertyName("confidence")] public double Confidence { get; init; }
    /// <summary>Weight in the solve: confidence × robust weight (0 = set aside).</summary>
    [JsonPropertyName("weight")] public double Weight { get; init; }
    /// <summary>RMS disagreement (µm) between the pair's map and the solved placements.</summary>
    [JsonPropertyName("residual_um")] public double ResidualUm { get; init; }
    /// <summary>"best", or "runner-up" when the second hypothesis replaced it.</summary>
    [JsonPropertyName("hypothesis")] public string Hypothesis { get; init; } = "best";
    /// <summary>Why the pair was set aside, or null.</summary>
    [JsonPropertyName("outlier")] public string? Outlier { get; init; }
}

/// <summary>The sidecar of a build: geometry, parameters and every section's record.</summary>
public sealed record BuildRecord
{
    [JsonPropertyName("software")] public string Software { get; init; } = "StackBuild";
    [JsonPropertyName("version")] public string Version { get; init; } = "";
    [JsonPropertyName("created")] public string Created { get; init; } = "";
    [JsonPropertyName("input")] public string Input { get; init; } = "";
    /// <summary>The name of the volume file (or OME-Zarr folder, OUT.ome.zarr) this sidecar was written with, in the sidecar's folder; null in sidecars from before it was recorded.</summary>
    [JsonPropertyName("volume")] public string? Volume { get; init; }
    /// <summary>SHA-256 of that volume file's bytes (lower-case hex), so a volume changed or replaced after the build is recognised; for an OME-Zarr folder, of its list of files and their SHA-256 (<see cref="SidecarFile.Sha256"/>).</summary>
    [JsonPropertyName("volume_sha256")] public string? VolumeSha256 { get; init; }
    [JsonPropertyName("aligned")] public bool Aligned { get; init; }
    [JsonPropertyName("dimensions")] public int[] Dimensions { get; init; } = [];
    [JsonPropertyName("voxel_size_mm")] public double[] VoxelSizeMm { get; init; } = [];
    [JsonPropertyName("axis_codes")] public string AxisCodes { get; init; } = "";
    [JsonPropertyName("affine")] public double[][] Affine { get; init; } = [];
    [JsonPropertyName("pixel_size_um")] public double InputPixelSizeUm { get; init; }
    [JsonPropertyName("spacing_um")] public double SpacingUm { get; init; }
    [JsonPropertyName("reference_section")] public int ReferenceSection { get; init; }
    /// <summary>Which way the volume faces and how its grid was cut.</summary>
    [JsonPropertyName("frame")] public FrameRecord? Frame { get; init; }
    [JsonPropertyName("parameters")] public RunParameters Parameters { get; init; } = new();
    [JsonPropertyName("warnings")] public List<string> Warnings { get; init; } = [];
    [JsonPropertyName("sections")] public List<SectionRecord> Sections { get; init; } = [];
}

/// <summary>The output frame: the reference section's frame as scanned, then the turns and mirror the user asked for.</summary>
public sealed record FrameRecord
{
    [JsonPropertyName("reference_section")] public int ReferenceSection { get; init; }
    /// <summary>How the reference section was chosen: "--reference" or a description of the default.</summary>
    [JsonPropertyName("reference_chosen_by")] public string ReferenceChosenBy { get; init; } = "";
    /// <summary>True when the reference was turned face up: it was mounted face down (manifest), or, by default, most sections matched it only mirrored.</summary>
    [JsonPropertyName("face_flipped")] public bool FaceFlipped { get; init; }
    /// <summary>The automatic upright turn, when asked for.</summary>
    [JsonPropertyName("upright")] public UprightRecord? Upright { get; init; }
    /// <summary>--rotate: degrees, clockwise as displayed, after any upright turn.</summary>
    [JsonPropertyName("rotate_deg")] public double RotateDegrees { get; init; }
    /// <summary>--mirror: the volume was mirrored left–right after the turns.</summary>
    [JsonPropertyName("mirror")] public bool Mirror { get; init; }
    /// <summary>"tissue" (the grid holds the tissue of every section plus the margin) or "canvas" (every whole image).</summary>
    [JsonPropertyName("crop")] public string Crop { get; init; } = "canvas";
    [JsonPropertyName("margin_um")] public double? MarginUm { get; init; }
    /// <summary>The tissue's box in the plane, in voxel coordinates: i min, j min, i max, j max (pixel edges).</summary>
    [JsonPropertyName("tissue_box_voxels")] public double[]? TissueBoxVoxels { get; init; }
    /// <summary>World position (RAS+ mm) given to the tissue's centre (middle of its box, middle of the stack).</summary>
    [JsonPropertyName("tissue_centre_mm")] public double[] TissueCentreMm { get; init; } = [0, 0, 0];
    /// <summary>With --template: the template whose frame the volume is in.</summary>
    [JsonPropertyName("template")] public TemplateFrameRecord? Template { get; init; }

    /// <summary>One line for people: which section's frame, what was turned, how the grid was cut.</summary>
    public string Describe()
    {
        var c = System.Globalization.CultureInfo.InvariantCulture;
        // Rounded before formatting (plus +0.0) so a tiny negative number does not print as "-0".
        static double R(double v) => Math.Round(v, 2) + 0.0;
        var parts = new List<string>();
        if (Template is { } t)
            parts.Add(string.Format(c, "the template's frame ({0}, cut along {1}, first section at template plane {2:0.##}{3}; {4} sections matched to it, {5} of them set aside)",
                System.IO.Path.GetFileName(t.File), t.CutAxis, R(t.FirstPlane), t.Reverse ? ", reversed" : "", t.Measured, t.Outliers));
        else
            parts.Add($"section {ReferenceSection} as scanned{(FaceFlipped ? ", turned face up" : "")}");
        if (Upright is { } u) parts.Add(string.Format(c, "upright (turned {0:0.#}° {1}, symmetry {2:0.00})", Math.Abs(u.AngleDegrees), u.AngleDegrees >= 0 ? "clockwise" : "anticlockwise", u.Symmetry));
        if (RotateDegrees != 0) parts.Add(string.Format(c, "turned {0:0.##}° {1}", Math.Abs(RotateDegrees), RotateDegrees > 0 ? "clockwise" : "anticlockwise"));
        if (Mirror) parts.Add("mirrored left-right");
        parts.Add(Crop == "tissue" ? string.Format(c, "cropped to the tissue + {0:0.#} µm", MarginUm) : "whole images kept");
        parts.Add(string.Format(c, "tissue centre at ({0:0.##}, {1:0.##}, {2:0.##}) mm", R(TissueCentreMm[0]), R(TissueCentreMm[1]), R(TissueCentreMm[2])));
        return string.Join(", ", parts);
    }
}

/// <summary>The template that gave the volume its frame.</summary>
public sealed record TemplateFrameRecord
{
    [JsonPropertyName("file")] public string File { get; init; } = "";
    /// <summary>The template's voxel axis the sections were cut along.</summary>
    [JsonPropertyName("cut_axis")] public string CutAxis { get; init; } = "k";
    /// <summary>Template plane index (fractional) of the first section; section planes follow at the section spacing.</summary>
    [JsonPropertyName("first_plane")] public double FirstPlane { get; init; }
    /// <summary>True when higher section numbers lie at lower template planes.</summary>
    [JsonPropertyName("reverse")] public bool Reverse { get; init; }
    /// <summary>"template" (the template's voxel size) or "sections" (the sections' pixel size and spacing).</summary>
    [JsonPropertyName("grid")] public string Grid { get; init; } = "sections";
    /// <summary>True when the stack as chained matched the template only mirrored (the reference section lay face down).</summary>
    [JsonPropertyName("mirrored")] public bool Mirrored { get; init; }
    /// <summary>Share of the sections searched over all angles that agreed on one map from the stack to the template.</summary>
    [JsonPropertyName("global_agreement")] public double GlobalAgreement { get; init; }
    /// <summary>Sections registered to their template slice (those set aside as outliers included).</summary>
    [JsonPropertyName("measured")] public int Measured { get; init; }
    /// <summary>Sections whose template match was set aside as an outlier.</summary>
    [JsonPropertyName("outliers")] public int Outliers { get; init; }
    /// <summary>Sections where the template's corrections step (the chain link from the section before is likely wrong; the stack is corrected on either side separately).</summary>
    [JsonPropertyName("chain_steps")] public List<int> ChainSteps { get; init; } = [];
}

/// <summary>One section against its template slice.</summary>
public sealed record SectionTemplateRecord
{
    /// <summary>The template plane (fractional index along the cut axis) the section was compared with.</summary>
    [JsonPropertyName("plane")] public double Plane { get; init; }
    /// <summary>True when the section was registered to its slice (false: gap, outside the template, or not registered).</summary>
    [JsonPropertyName("matched")] public bool Matched { get; init; }
    /// <summary>Normalised mutual information − 1 of the match (Studholme et al. 1999): 0 = unrelated, higher = more alike.</summary>
    [JsonPropertyName("similarity")] public double? Similarity { get; init; }
    [JsonPropertyName("confidence")] public double? Confidence { get; init; }
    /// <summary>How far (µm, at the section's centre) the template match lay from the neighbour chain's placement.</summary>
    [JsonPropertyName("residual_um")] public double? ResidualUm { get; init; }
    [JsonPropertyName("residual_deg")] public double? ResidualDegrees { get; init; }
    /// <summary>Why the match was set aside, or null when it was used.</summary>
    [JsonPropertyName("outlier")] public string? Outlier { get; init; }
    [JsonPropertyName("note")] public string? Note { get; init; }
    /// <summary>True when the section was placed by its own template match alone, not by the neighbour chain (the note says why).</summary>
    [JsonPropertyName("placed_by_template")] public bool PlacedByTemplate { get; init; }
    /// <summary>
    /// True when the section was left out because nothing placed it: its part of the chain is linked to the rest by no
    /// confident neighbour match, and no template match in that part was accepted (the note says why); null otherwise.
    /// </summary>
    [JsonPropertyName("part_unplaced")] public bool? PartUnplaced { get; init; }
    /// <summary>
    /// The number of a section placed by its own template match that this section was carried with through its
    /// registration (chain link) to it, its own match having been set aside; null otherwise.
    /// </summary>
    [JsonPropertyName("carried_with")] public int? CarriedWith { get; init; }
    /// <summary>True when the template's corrections step at this section: the chain link from the section before is likely wrong.</summary>
    [JsonPropertyName("chain_step")] public bool ChainStep { get; init; }
    /// <summary>
    /// How far (µm, at the section's centre) the template moved the chain's placement: the smoothed correction, or for a
    /// section placed by its own template match the whole move to it; null when the chain did not place the section.
    /// </summary>
    [JsonPropertyName("correction_um")] public double? CorrectionUm { get; init; }
    [JsonPropertyName("correction_deg")] public double? CorrectionDegrees { get; init; }
    /// <summary>
    /// How far (µm, at the section's centre) its own template match lies from its final placement; null when unmatched. For a
    /// section carried with another (<see cref="CarriedWith"/>), the match searched from the carried placement.
    /// </summary>
    [JsonPropertyName("misfit_um")] public double? MisfitUm { get; init; }
    /// <summary>
    /// How far (µm, the largest at the corners of the image's middle half) the template moved the section relative to the placed section
    /// before it, against the neighbour chain's link between them; null for the first placed section or one the chain did
    /// not place.
    /// </summary>
    [JsonPropertyName("link_change_um")] public double? LinkChangeUm { get; init; }
}

/// <summary>The midline found for --upright.</summary>
public sealed record UprightRecord
{
    /// <summary>The turn applied, degrees clockwise as displayed.</summary>
    [JsonPropertyName("angle_deg")] public double AngleDegrees { get; init; }
    /// <summary>How alike each section is to its own mirror image about the midline (correlation, combined over the stack; 1 = perfectly symmetric).</summary>
    [JsonPropertyName("symmetry")] public double Symmetry { get; init; }
    /// <summary>The same measure for the best clearly different axis.</summary>
    [JsonPropertyName("runner_up_symmetry")] public double RunnerUpSymmetry { get; init; }
    [JsonPropertyName("sections_used")] public int SectionsUsed { get; init; }
}

/// <summary>A registration hypothesis kept for the record.</summary>
/// <param name="FlipsSide">True when this hypothesis has the other handedness than the one chosen (the section would be
/// face down instead of face up, or the reverse).</param>
public sealed record HypothesisRecord(
    [property: JsonPropertyName("mirrored")] bool Mirrored,
    [property: JsonPropertyName("rotation_deg")] double RotationDegrees,
    [property: JsonPropertyName("ncc")] double Ncc,
    [property: JsonPropertyName("flips_side")] bool FlipsSide = false);

/// <summary>The pair that places a part of the stack: section <see cref="Section"/> (in the part) matched onto <see cref="Onto"/>, with that match's confidence.</summary>
public sealed record PartJoinRecord(
    [property: JsonPropertyName("section")] int Section,
    [property: JsonPropertyName("onto")] int Onto,
    [property: JsonPropertyName("confidence")] double Confidence);
