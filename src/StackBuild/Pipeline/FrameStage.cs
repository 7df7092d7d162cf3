using System.Globalization;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>
/// Stage 5, the framed placements: the placements re-expressed once in the output frame (the template's, or a
/// section's frame as scanned, then upright, turned and mirrored as asked).
/// </summary>
/// <param name="FrameIndex">Index (in the prepared sections) of the section whose frame the volume takes.</param>
/// <param name="Midline">The midline found for --upright, when asked for.</param>
public sealed record FramedPlacements(Placements Placements, int FrameIndex, MidlineResult? Midline);

public static class FrameStage
{
    /// <summary>Most sections handed to the midline search (evenly spread over the stack).</summary>
    private const int MidlineSections = 48;

    /// <summary>Chooses the frame and re-expresses every placement in it; refuses a frame that cannot be had.</summary>
    public static FramedPlacements Orient(SeriesPlan plan, PreparedSections sections, Placements placements, IProgress<string>? progress)
    {
        var options = plan.Options;
        int frameIndex = placements.ReferenceIndex;
        MidlineResult? midline = null;
        if (placements.OnTemplate is null && options.Frame.ReferenceSection is int wanted)
        {
            frameIndex = sections.Sections.ToList().FindIndex(w => w.Entry.Number == wanted);
            if (placements.Chain[frameIndex].Route == LinkRoute.Failed)
                throw new InputProblemException(options.Input, $"--reference {wanted}: that section could not be matched to its neighbours, so it has no place in the volume",
                    "choose another section for --reference (the sidecar of a build without it lists each section's status)");
            // Section N exactly as it lay on its slide, turned face up only where the manifest says it was mounted face down.
            var toFrame = placements.Chain[frameIndex].ToReference.Inverse();
            bool faceFlipped = sections[frameIndex].Entry.MountedMirrored == true;
            if (faceFlipped) toFrame = toFrame.Then(Transform2D.MirrorX((sections[frameIndex].Width - 1) / 2.0));
            placements = placements.Reexpressed(toFrame) with { FaceFlipped = faceFlipped };
        }
        var frameImage = sections[frameIndex];
        double frameCx = (frameImage.Width - 1) / 2.0, frameCy = (frameImage.Height - 1) / 2.0;
        if (options.Frame.Upright && placements.OnTemplate is null)
        {
            if (!placements.Aligned)
                throw new InputProblemException(options.Input, "--upright needs aligned sections (it cannot be combined with --no-align or used on one section)",
                    "leave out --upright, or turn the volume with --rotate DEG");
            progress?.Report("upright: finding the midline");
            midline = FindMidline(sections, placements.Chain);
            if (!midline.Clear)
                throw new InputProblemException(options.Input, $"--upright: {midline.Problem}",
                    $"leave out --upright, or turn the volume yourself with --rotate DEG (--rotate {midline.AngleDegrees.ToString("0.#", CultureInfo.InvariantCulture)} would make the best axis found vertical)");
            // Turns and mirror happen about the midline, so it ends on a vertical line through the same point.
            (frameCx, frameCy) = (midline.CentreX, midline.CentreY);
        }
        var adjustment = OutputFrame.Adjustment(midline?.AngleDegrees ?? 0, options.Frame.RotateDegrees, options.Frame.Mirror, frameCx, frameCy);
        if (adjustment != Transform2D.Identity) placements = placements.Reexpressed(adjustment);
        return new FramedPlacements(placements, frameIndex, midline);
    }

    /// <summary>
    /// The specimen's midline in the frame (reference-section working pixels): every placed section's prepared image
    /// (tissue bright on dark) laid into one canvas holding them all, handed to <see cref="Midline.Estimate"/>.
    /// </summary>
    private static MidlineResult FindMidline(PreparedSections sections, IReadOnlyList<ChainPlacement> chain)
    {
        var placed = Enumerable.Range(0, sections.Count).Where(n => chain[n].Route != LinkRoute.Failed && sections[n].Prepared is not null).ToList();
        if (placed.Count > MidlineSections)
            placed = Enumerable.Range(0, MidlineSections).Select(i => placed[(int)Math.Round(i * (placed.Count - 1) / (double)(MidlineSections - 1))]).Distinct().ToList();
        var box = PlaneBox.Empty;
        foreach (int n in placed)
        {
            var prepared = sections[n].Prepared!;
            var map = prepared.FullToWork.Inverse().Then(chain[n].ToReference);
            int width = prepared.WorkWidth, height = prepared.WorkHeight;
            foreach (var (x, y) in new[] { (-0.5, -0.5), (width - 0.5, -0.5), (-0.5, height - 0.5), (width - 0.5, height - 0.5) })
            {
                var p = map.Apply(x, y);
                box = box.Including(p.X, p.Y);
            }
        }
        int w = Math.Max(1, (int)Math.Ceiling(box.MaxX - box.MinX)), h = Math.Max(1, (int)Math.Ceiling(box.MaxY - box.MinY));
        var toCanvas = Transform2D.Translation(-box.MinX - 0.5, -box.MinY - 0.5);
        var planes = new GrayImage[placed.Count];
        var weights = new double[placed.Count];
        Parallel.For(0, placed.Count, i =>
        {
            var prepared = sections[placed[i]].Prepared!;
            var map = prepared.FullToWork.Inverse().Then(chain[placed[i]].ToReference).Then(toCanvas);
            planes[i] = Resampler.Warp(prepared.WorkImage, map.Inverse(), w, h, 0f);
            weights[i] = prepared.TissueFraction;
        });
        var result = Midline.Estimate(planes, weights);
        // Back from the canvas to the frame's own pixels.
        return result with { CentreX = result.CentreX + box.MinX + 0.5, CentreY = result.CentreY + box.MinY + 0.5 };
    }
}
