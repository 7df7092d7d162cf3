using System.Globalization;
using StackBuild.Frame;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Render;
using StackBuild.Solve;
using StackBuild.Numerics;

namespace StackBuild.Pipeline;

/// <summary>Stage 8, the build record: the sidecar's account of the build, assembled from the stages' records.</summary>
public static class RecordStage
{
    /// <summary>
    /// The sidecar record. <paramref name="createdUtc"/> is the run's time, the one field that differs between two builds
    /// of the same inputs (<see cref="BuildRecord.Created"/>).
    /// </summary>
    public static BuildRecord Record(SeriesPlan plan, PreparedSections sections, FramedPlacements framed, OutputGrid grid, RenderedVolume rendered,
        DateTime createdUtc)
    {
        var options = plan.Options;
        var series = plan.Series;
        var placements = framed.Placements;
        var chain = placements.Chain;
        var onTemplate = placements.OnTemplate;
        var smoothing = placements.Smoothing;
        var parity = placements.Parity;
        double workUm = sections.WorkPixelUm;
        bool aligned = placements.Aligned;
        var records = rendered.Sections.Select(r => Section(r, plan, sections, placements, grid, rendered.Resampling?.ToUm)).ToList();

        var warnings = new List<string>(series.Warnings);
        warnings.AddRange(placements.Warnings);
        warnings.AddRange(grid.Warnings);
        warnings.AddRange(rendered.Warnings);
        var unmatched = records.Where(r => r.Status == SectionOutcome.Failed && r.Template?.PartUnplaced != true).ToList();
        if (unmatched.Count > 0) warnings.Add($"{unmatched.Count} section(s) could not be matched to a neighbour and were left out (status 'failed' in the sidecar): " +
            string.Join(", ", unmatched.Select(r => r.Number.ToString(CultureInfo.InvariantCulture))));
        var lost = records.Where(r => r.Template?.PartUnplaced == true).ToList();
        if (lost.Count > 0) warnings.Add($"{lost.Count} section(s) lie in a part of the stack that no confident neighbour match links to the rest, and their " +
            "template matches could not place that part either, so they were left out (status 'failed', template.part_unplaced in the sidecar): " +
            string.Join(", ", lost.Select(r => r.Number.ToString(CultureInfo.InvariantCulture))));

        var affine = rendered.Volume.Affine;
        var sizes = affine.VoxelSizes;
        var parameters = new RunParameters
        {
            OutputPixelSizeUm = plan.OutputPixelUm,
            RegistrationPixelSizeUm = workUm,
            Interpolation = options.Interpolation,
            Channel = options.Channel,
            Aligned = aligned,
            WorkSizePx = options.Registration.WorkSize,
            MinConfidence = options.Chain.MinConfidence,
            Fft = Fft2D.ProviderName,
            SmoothingStrength = smoothing is null ? null : options.Smoothing.Strength,
            Fill = rendered.Fill,
            PlaneResampling = rendered.Resampling,
            Template = onTemplate is not null,
            RouteClosure = smoothing is null ? null : new RouteClosure(smoothing.SlowClosureShare, smoothing.SlowClosureLimit, smoothing.LongPairWeight),
        };
        int frameSection = sections[framed.FrameIndex].Entry.Number;
        var midline = framed.Midline;
        return new BuildRecord
        {
            Version = BuildPipeline.Version,
            Created = createdUtc.ToString("yyyy-MM-ddTHH:mm:ssZ", CultureInfo.InvariantCulture),
            Input = series.ManifestPath ?? series.Folder,
            Aligned = aligned,
            Dimensions = [rendered.Volume.Nx, rendered.Volume.Ny, rendered.Volume.Nz],
            VoxelSizeMm = [sizes.I, sizes.J, sizes.K],
            AxisCodes = affine.AxisCodes.Code,
            Affine = affine.ToRows(),
            InputPixelSizeUm = series.PixelSizeUm,
            SpacingUm = series.SpacingUm,
            ReferenceSection = frameSection,
            Frame = new FrameRecord
            {
                ReferenceSection = frameSection,
                ReferenceChosenBy = onTemplate is not null ? "the neighbour chain; the frame is the template's"
                    : options.Frame.ReferenceSection is null
                    ? (aligned ? "the section nearest the middle of the stack that matched its neighbours confidently" : "the first section")
                    : "--reference",
                FaceFlipped = placements.FaceFlipped,
                Upright = midline is null ? null : new UprightRecord
                {
                    AngleDegrees = midline.AngleDegrees,
                    Symmetry = midline.Symmetry,
                    RunnerUpSymmetry = midline.RunnerUpSymmetry,
                    SectionsUsed = midline.PlanesUsed,
                },
                RotateDegrees = options.Frame.RotateDegrees,
                Mirror = options.Frame.Mirror,
                Crop = grid.Cropped ? "tissue" : "canvas",
                MarginUm = grid.Cropped ? options.Frame.MarginUm : null,
                TissueBoxVoxels = grid.TissueBoxVoxels,
                TissueCentreMm = [grid.TissueCentreMm.X, grid.TissueCentreMm.Y, grid.TissueCentreMm.Z],
                Template = onTemplate is null ? null : new TemplateFrameRecord
                {
                    File = Path.GetFullPath(options.Template!.Path),
                    CutAxis = options.Template.CutAxis.ToString(),
                    FirstPlane = onTemplate.FirstPlane,
                    Reverse = options.Template.Reverse,
                    Grid = plan.TemplateGrid ? "template" : "sections",
                    Mirrored = onTemplate.Guide.Mirrored,
                    GlobalAgreement = onTemplate.Guide.GlobalAgreement,
                    Measured = onTemplate.Guide.MeasuredCount,
                    Outliers = onTemplate.Guide.OutlierCount,
                    ChainSteps = (onTemplate.Guide.ChainSteps ?? []).Select(i => sections[i].Entry.Number).ToList(),
                },
            },
            Parameters = parameters,
            Warnings = warnings,
            Sections = records,
        };
    }

    private static SectionRecord Section(RenderedSection r, SeriesPlan plan, PreparedSections sections, Placements placements, OutputGrid grid,
        double? resampledUm)
    {
        var s = r.Entry;
        var series = plan.Series;
        double workUm = sections.WorkPixelUm;
        var record = new SectionRecord
        {
            Number = s.Number,
            File = s.FilePath is null ? null : Path.GetRelativePath(series.Folder, s.FilePath),
            ZIndex = r.Plane,
            PositionUm = s.PositionUm,
            PixelSizeUm = s.Status == Series.SectionStatus.Gap ? null : s.PixelSizeUm,
            ImageSizePx = s.Image is { } facts ? [facts.Width, facts.Height] : null,
            Damaged = s.Damaged,
            Mirrored = s.MountedMirrored,
            Note = string.IsNullOrEmpty(s.Note) ? null : s.Note,
            Status = r.Status,
            Filled = r.Filled is { } f ? (f == GapFill.Flow ? "flow" : "linear") : null,
            FilledFrom = r.FilledFrom,
            VolumeZ = resampledUm is double voxelUm ? r.Plane * series.SpacingUm / voxelUm : null,
        };
        if (r.Index is not int n) return record;
        var place = placements.Chain[n];
        var pair = place.Pair;
        var smoothing = placements.Smoothing;
        var parity = placements.Parity;
        record = record with
        {
            Confidence = pair?.Confidence,
            Ncc = pair?.Best.Ncc,
            PeakToSidelobe = pair?.Best.PeakToSidelobe,
            RegisteredTo = place.LinkedTo >= 0 ? sections[place.LinkedTo].Entry.Number : null,
            Route = place.Route,
            Part = place.Route != LinkRoute.Failed && placements.IsUncertainPart(place.Part) ? place.Part : null,
            PartJoinedBy = place.Route != LinkRoute.Failed && placements.IsUncertainPart(place.Part) && placements.JoinOf(place.Part) is { } join
                ? new PartJoinRecord(sections[join.Moving].Entry.Number, sections[join.Fixed].Entry.Number, Math.Round(join.Confidence, 4)) : null,
            RouteDisagreementUm = place.RouteDisagreement is { } d ? d * workUm : null,
            RunnerUp = pair?.RunnerUp is { } ru ? new HypothesisRecord(ru.Mirrored, ru.RotationDegrees, ru.Ncc, ru.Mirrored != pair.Best.Mirrored) : null,
            DriftCorrectionUm = smoothing is null || place.Route is LinkRoute.Failed or LinkRoute.Template || place.Part != 0 ? null : smoothing.CorrectionPx[n] * workUm,
            Template = placements.OnTemplate is { } onTemplate ? TemplateRecord(onTemplate, placements.Chain, n, workUm, sections[n])
                with { CarriedWith = onTemplate.Guide.Sections[n].CarriedFrom is int from ? sections[from].Entry.Number : null } : null,
            SideMargin = parity is null || double.IsInfinity(parity.Margin[n]) ? null : Math.Round(parity.Margin[n], 4),
            NccBefore = place.LinkedTo >= 0 && sections[n].Prepared is { } a && sections[place.LinkedTo].Prepared is { } b
                ? CentredNcc(a.WorkImage, b.WorkImage) : null,
            Pairs = smoothing?.Pairs.Where(d => d.Moving == n || d.Fixed == n).Select(d => new PairLinkRecord
            {
                With = sections[d.Moving == n ? d.Fixed : d.Moving].Entry.Number,
                Confidence = d.Confidence,
                Weight = d.Weight,
                ResidualUm = d.ResidualPx * workUm,
                Hypothesis = d.UsedRunnerUp ? "runner-up" : "best",
                Outlier = d.Outlier,
            }).ToList(),
        };
        if (r.Status == SectionOutcome.Failed)
            return record with { Note = Join(record.Note, record.Template?.PartUnplaced == true
                ? "its part of the stack could be placed neither by the neighbours nor by the template; plane left empty"
                : "no confident match with a neighbour; plane left empty") };
        if (r.ImageToPlane is not { } imageToPlane) return record;
        var chainBefore = placements.ChainBefore;
        return record with
        {
            Mirrored = imageToPlane.IsMirrored,
            RotationDegrees = imageToPlane.RotationDegrees,
            ShiftPx = [imageToPlane.M02, imageToPlane.M12],
            Matrix = imageToPlane.ToRows(),
            ChainRotationDegrees = chainBefore is null || chainBefore[n].Route == LinkRoute.Failed ? null : ChainMap(chainBefore[n]).RotationDegrees,
            ChainShiftPx = chainBefore is null || chainBefore[n].Route == LinkRoute.Failed ? null : [ChainMap(chainBefore[n]).M02, ChainMap(chainBefore[n]).M12],
        };
        Geometry.Transform2D ChainMap(ChainPlacement p) => grid.ImageToPlane(sections[n].FullToWork, p.ToReference);
    }

    private static SectionTemplateRecord TemplateRecord(TemplatePlacement t, IReadOnlyList<ChainPlacement> chain, int n, double workUm, WorkingSection image)
    {
        var p = t.Guide.Sections[n];
        double cx = (image.Width - 1) / 2.0, cy = (image.Height - 1) / 2.0;
        double? misfit = null;
        // A carried section's own match near its chain placement was set aside; what checks where it was put is the match
        // searched from the carried placement.
        if ((p.CarriedCheck ?? p.Measured) is { } measured)
        {
            var (ax, ay) = measured.Apply(cx, cy);
            var (bx, by) = p.SectionToSlice.Apply(cx, cy);
            misfit = Math.Sqrt((ax - bx) * (ax - bx) + (ay - by) * (ay - by)) * workUm;
        }
        // How far the template moved the section relative to the placed section before it, against the chain's link between
        // them (the pair registration): the largest distance at the corners of the image's middle half (where the tissue
        // lies; the slide's corners would magnify a small turn), in the previous section's pixels.
        double? linkChange = null;
        int m = n - 1;
        while (m >= 0 && chain[m].Route == LinkRoute.Failed) m--;
        if (m >= 0 && chain[n].Route != LinkRoute.Failed && chain[m].Part == chain[n].Part) // no link between parts
        {
            var q = t.Guide.Sections[m];
            var final = p.SectionToSlice.Then(q.SectionToSlice.Inverse());
            var linked = p.ChainToSlice.Then(q.ChainToSlice.Inverse());
            double w = image.Width - 1.0, h = image.Height - 1.0;
            linkChange = new[] { (w / 4, h / 4), (3 * w / 4, h / 4), (w / 4, 3 * h / 4), (3 * w / 4, 3 * h / 4) }
                .Max(c => { var (ax, ay) = final.Apply(c.Item1, c.Item2); var (bx, by) = linked.Apply(c.Item1, c.Item2); return Math.Sqrt((ax - bx) * (ax - bx) + (ay - by) * (ay - by)); })
                * workUm;
        }
        return new SectionTemplateRecord
        {
            Plane = t.Z[n],
            LinkChangeUm = linkChange,
            Matched = p.Measured is not null,
            Similarity = p.Similarity,
            Confidence = p.Measured is null ? null : p.Confidence,
            ResidualUm = p.ResidualPx * workUm,
            ResidualDegrees = p.ResidualDegrees,
            Outlier = p.Outlier ? p.Reason ?? "outlier" : null,
            Note = p.PlacedByTemplate || p.Unplaced || (!p.Outlier && p.Measured is null) ? p.Reason : null,
            PlacedByTemplate = p.PlacedByTemplate,
            PartUnplaced = p.Unplaced ? true : null,
            ChainStep = t.Guide.ChainSteps?.Contains(n) == true,
            // Nothing was corrected for a section left out; one placed by its own match was moved all the way to it.
            CorrectionUm = chain[n].Route == LinkRoute.Failed ? null
                : p.PlacedByTemplate ? p.ResidualPx * workUm : Math.Sqrt(p.CorrectionX * p.CorrectionX + p.CorrectionY * p.CorrectionY) * workUm,
            CorrectionDegrees = chain[n].Route == LinkRoute.Failed ? null : p.PlacedByTemplate ? p.ResidualDegrees : p.CorrectionDegrees,
            MisfitUm = misfit,
        };
    }

    /// <summary>
    /// Normalised cross-correlation of two images laid centre on centre, over their overlap: how alike two
    /// neighbouring sections look as they were mounted, before any alignment.
    /// </summary>
    internal static double CentredNcc(GrayImage a, GrayImage b)
    {
        int w = Math.Min(a.Width, b.Width), h = Math.Min(a.Height, b.Height);
        int ax = (a.Width - w) / 2, ay = (a.Height - h) / 2, bx = (b.Width - w) / 2, by = (b.Height - h) / 2;
        double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
        for (int y = 0; y < h; y++)
        {
            var ra = a.Row(ay + y).Slice(ax, w);
            var rb = b.Row(by + y).Slice(bx, w);
            for (int x = 0; x < w; x++)
            {
                double u = ra[x], v = rb[x];
                sa += u; sb += v; saa += u * u; sbb += v * v; sab += u * v;
            }
        }
        double n = (double)w * h;
        double cov = sab - sa * sb / n, va = saa - sa * sa / n, vb = sbb - sb * sb / n;
        return va > 0 && vb > 0 ? cov / Math.Sqrt(va * vb) : 0;
    }

    private static string Join(string? a, string b) => string.IsNullOrEmpty(a) ? b : $"{a}; {b}";
}
