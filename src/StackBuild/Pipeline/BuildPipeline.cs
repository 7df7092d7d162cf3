using System.Collections.Concurrent;
using System.Globalization;
using System.Reflection;
using StackBuild.Frame;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Register;
using StackBuild.Render;
using StackBuild.Series;
using StackBuild.Solve;
using StackBuild.Template;

namespace StackBuild.Pipeline;

/// <summary>Options of one build, passed down explicitly.</summary>
public sealed record BuildOptions
{
    public required string Input { get; init; }
    public SeriesOptions Series { get; init; } = new();
    public AxisCodes Axes { get; init; } = AxisCodes.Default;
    /// <summary>In-plane voxel size of the output in µm; null = the series' pixel size, coarsened to fit <see cref="MaxPlaneSide"/>.</summary>
    public double? OutputPixelSizeUm { get; init; }
    /// <summary>Plane spacing of the output in µm (also the in-plane voxel size when <see cref="OutputPixelSizeUm"/> is not given); null = the section spacing.</summary>
    public double? VoxelSizeUm { get; init; }
    /// <summary>Largest side of an output plane, in voxels, when the voxel size is chosen automatically.</summary>
    public int MaxPlaneSide { get; init; } = 2048;
    public Interpolation Interpolation { get; init; } = Interpolation.Bilinear;
    public GrayChannel Channel { get; init; } = GrayChannel.Luminance;
    /// <summary>False: place the sections centred and unaligned (the series as scanned).</summary>
    public bool Align { get; init; } = true;
    public RegistrationOptions Registration { get; init; } = new();
    public ChainOptions Chain { get; init; } = new();
    /// <summary>The reference-free smoothing prior on top of the chain (<see cref="SmoothingSolver"/>); Strength &lt; 0 turns it off.</summary>
    public SmoothingOptions Smoothing { get; init; } = new();
    /// <summary>How gap, excluded and failed planes are filled from their nearest placed neighbours.</summary>
    public GapFill Fill { get; init; } = GapFill.Flow;
    /// <summary>Which way the output faces and how far its grid reaches (<see cref="FrameOptions"/>).</summary>
    public FrameOptions Frame { get; init; } = new();
    /// <summary>A template volume that guides the drift and gives the output its frame; null = none.</summary>
    public TemplateOptions? Template { get; init; }
}

/// <summary>How the series lies in a template volume (blockface stack, MRI of the specimen).</summary>
public sealed record TemplateOptions
{
    public required string Path { get; init; }
    /// <summary>The template's voxel axis along which the sections were cut: 'i', 'j' or 'k'.</summary>
    public char CutAxis { get; init; } = 'k';
    /// <summary>Template plane index (fractional) of the first section; null = the series centred on the template along the cut axis.</summary>
    public double? FirstPlane { get; init; }
    /// <summary>True when higher section numbers lie at lower template plane indices.</summary>
    public bool Reverse { get; init; }
    /// <summary>True: the output takes the template's voxel size (in the plane, and as plane spacing); false: the sections' own.</summary>
    public bool TemplateGrid { get; init; }
}

/// <summary>A built volume (intensities in the input's own units: 0–255 for 8-bit, 0–65535 for 16-bit) and its record.</summary>
public sealed record BuildResult(Volume Volume, BuildRecord Record, int InputBitDepth);

/// <summary>series → register → solve → render: the whole build as one call on the input files.</summary>
public static class BuildPipeline
{
    public static string Version =>
        typeof(BuildPipeline).Assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion.Split('+')[0] ?? "0";

    private static string Num(double v) => v.ToString("R", CultureInfo.InvariantCulture);

    /// <summary>A present section with its registration image.</summary>
    private sealed record Working(SectionEntry Entry, Transform2D FullToWork, GrayImage Image, PreparedSection? Prepared);

    /// <summary>Most planes an output volume may have (<see cref="Volume.MaxPlanes"/>).</summary>
    public const int MaxPlanes = Volume.MaxPlanes;

    /// <summary>Smallest registration image side, in pixels, that registration can work with.</summary>
    public const int MinRegistrationSide = 16;

    public static BuildResult Run(BuildOptions options, IProgress<string>? progress = null)
    {
        var series = SeriesReader.Open(options.Input, options.Series);
        var present = series.Sections.Where(s => s.Status == SectionStatus.Present && s.Image is not null).ToList();
        if (present.Count == 0)
            throw new InputProblemException(options.Input, "the series has no sections to build (all are gaps or excluded)",
                "check the manifest's exclude column and the file names");

        CheckReferenceSection(options, series);
        TemplateVolume? template = null;
        if (options.Template is { } templateOptions)
        {
            CheckTemplateCombination(options);
            template = TemplateVolume.Load(templateOptions.Path, templateOptions.CutAxis);
            CheckTemplateDepths(template, templateOptions, series, present); // before any registration
        }
        int bits = present.Max(s => s.Image!.BitsPerChannel);
        double maxValue = bits > 8 ? 65535 : 255;
        double largestUm = present.Max(s => Math.Max(s.Image!.Width, s.Image!.Height) * s.PixelSizeUm);
        bool templateGrid = template is not null && options.Template!.TemplateGrid;
        double? zSpacingUm = options.VoxelSizeUm ?? (templateGrid ? template!.PlaneSpacingMm * 1000 : null);
        double? planeUm = options.OutputPixelSizeUm ?? options.VoxelSizeUm
            ?? (templateGrid ? Math.Min(template!.PixelWidthMm, template.PixelHeightMm) * 1000 : null);
        double outUm = planeUm ?? series.PixelSizeUm;
        if (planeUm is null && largestUm / outUm > options.MaxPlaneSide)
            outUm = largestUm / options.MaxPlaneSide;

        // 1. Registration images: every section at one common pixel size, about WorkSize on the long side.
        var working = LoadWorking(present, options, largestUm, progress, out double workUm);

        // 2–3. Register neighbours and chain them into the reference frame.
        IReadOnlyList<ChainPlacement> chain;
        SmoothingResult? smoothing = null;
        IReadOnlyList<ChainPlacement>? chainBefore = null; // the neighbour chain, kept when the global solve replaces it
        bool faceFlipped = false;
        ParityResult? parity = null;
        TemplateSlices? templateSlices = null;
        TemplateMatch?[]? scratch = null; // template matches from scratch made for the side votes, reused by the guide
        var warnings = new List<string>(series.Warnings);
        if (options.Align && working.Count > 1)
        {
            var registered = RegisterNeighbours(working, options, progress);
            // Which side of every section is up, decided from every pair within MirrorParity.MaxReach sections at once; each
            // pair then keeps its best hypothesis with that mirror, so one weak pair cannot turn over the sections after it.
            var steps = working.Select(w => w.Entry.PositionUm / series.SpacingUm).ToList();
            parity = MirrorParity.Decide(working.Count, registered, steps);
            if (template is not null)
            {
                // Where the pairs can hardly tell a section's side, its template match from scratch votes (and a spread of
                // confident sections says whether face up looks mirrored on the template).
                templateSlices = SliceTemplate(template, options.Template!, series, working, workUm, progress);
                scratch = TemplateSideMatches(working, templateSlices, parity, progress);
                parity = MirrorParity.Decide(working.Count, registered, steps, scratch.Select(m => m is null ? null : SideVoteOf(m)).ToList());
            }
            var decided = parity;
            var pairs = new ConcurrentDictionary<(int, int), PairResult>(registered.Select(kv =>
                KeyValuePair.Create(kv.Key, kv.Value.WithMirror(decided.Flipped[kv.Key.Item1] != decided.Flipped[kv.Key.Item2]))));
            chain = ChainSolver.Solve(working.Count, (m, f) => pairs.GetOrAdd((m, f), k =>
                    RegisterPair(working, k.Item1, k.Item2, options).WithMirror(decided.Flipped[k.Item1] != decided.Flipped[k.Item2])),
                i => Corners(working[i].Image), options.Chain);
            chain = FaceMajorityUp(chain, working, out faceFlipped);
            if (options.Smoothing.Strength >= 0 && working.Count > 2)
            {
                chainBefore = chain;
                // The solve weighs first- and second-neighbour pairs; the third-neighbour ones only serve the mirror decision.
                var observations = pairs.Where(kv => kv.Key.Item1 - kv.Key.Item2 <= 2).Select(kv => new PairObservation(kv.Key.Item1, kv.Key.Item2, kv.Value)).OrderBy(o => o.Moving).ThenBy(o => o.Fixed).ToList();
                int referenceIndex = chain.Select((c, i) => (c, i)).First(t => t.c.Route == LinkRoute.Reference).i;
                // Sections of a part the chain could not link to the reference are left as the chain put them (no pair ties them).
                smoothing = SmoothingSolver.Solve(chain.Select(c => c.Route == LinkRoute.Failed || c.Part != 0 ? (Transform2D?)null : c.ToReference).ToList(),
                    referenceIndex, observations, i => SamplePoints(working[i].Image), options.Smoothing with { MinConfidence = options.Chain.MinConfidence });
                var solved = smoothing.ToReference;
                chain = chain.Select((c, i) => c.Route == LinkRoute.Failed || c.Part != 0 ? c : c with { ToReference = solved[i] }).ToList();
            }
        }
        else
        {
            // Unaligned: centred as scanned, turned face up only where the manifest says a section was mounted face down.
            chain = working.Select((w, i) => new ChainPlacement(
                (w.Entry.MountedMirrored == true ? Transform2D.MirrorX((w.Image.Width - 1) / 2.0) : Transform2D.Identity).Then(CentreOn(w.Image, working[0].Image)),
                i == 0 ? LinkRoute.Reference : LinkRoute.Neighbour, -1, null, null)).ToList();
            if (options.Align) warnings.Add("only one section: nothing to align");
        }
        bool aligned = options.Align && working.Count > 1;

        // 3b. The output frame: the template's, or the reference section's frame as scanned, then upright, turned and
        // mirrored as asked.
        int chainReference = chain.Select((c, i) => (c, i)).First(t => t.c.Route == LinkRoute.Reference).i;
        int frameIndex = chainReference;
        TemplatePlacement? onTemplate = null;
        MidlineResult? midline = null;
        if (template is not null)
        {
            if (!aligned)
                throw new InputProblemException(options.Template!.Path, "--template needs aligned sections (it cannot be combined with --no-align or used on one section)",
                    "leave out --no-align, or build without --template");
            onTemplate = PlaceOnTemplate(template, options.Template!, series, working, chain, parity?.Margin, workUm, templateSlices, scratch, progress);
            chainBefore = onTemplate.ChainBefore;
            chain = onTemplate.Chain;
            if (onTemplate.Guide.MeasuredCount == 0)
                warnings.Add("no section could be matched to its template slice; the sections follow the neighbour chain only — check --template-axis and --template-first-plane");
            else if (onTemplate.Guide.GlobalAgreement < MinTemplateAgreement)
                warnings.Add($"the sections agree poorly on where the stack lies on the template (global agreement {onTemplate.Guide.GlobalAgreement:0.00}, " +
                    $"expected above {MinTemplateAgreement:0.0}): the cut axis, first plane or direction may be wrong — check --template-axis, --template-first-plane and --template-reverse, and the template-match column of the report");
        }
        else if (options.Frame.ReferenceSection is int wanted)
        {
            frameIndex = working.FindIndex(w => w.Entry.Number == wanted);
            if (chain[frameIndex].Route == LinkRoute.Failed)
                throw new InputProblemException(options.Input, $"--reference {wanted}: that section could not be matched to its neighbours, so it has no place in the volume",
                    "choose another section for --reference (the sidecar of a build without it lists each section's status)");
            // Section N exactly as it lay on its slide, turned face up only where the manifest says it was mounted face down.
            var toFrame = chain[frameIndex].ToReference.Inverse();
            faceFlipped = working[frameIndex].Entry.MountedMirrored == true;
            if (faceFlipped) toFrame = toFrame.Then(Transform2D.MirrorX((working[frameIndex].Image.Width - 1) / 2.0));
            chain = Reexpress(chain, toFrame);
            if (chainBefore is not null) chainBefore = Reexpress(chainBefore, toFrame);
        }
        var frameImage = working[frameIndex].Image;
        double frameCx = (frameImage.Width - 1) / 2.0, frameCy = (frameImage.Height - 1) / 2.0;
        if (options.Frame.Upright && template is null)
        {
            if (!aligned)
                throw new InputProblemException(options.Input, "--upright needs aligned sections (it cannot be combined with --no-align or used on one section)",
                    "leave out --upright, or turn the volume with --rotate DEG");
            progress?.Report("upright: finding the midline");
            midline = FindMidline(working, chain);
            if (!midline.Clear)
                throw new InputProblemException(options.Input, $"--upright: {midline.Problem}",
                    $"leave out --upright, or turn the volume yourself with --rotate DEG (--rotate {midline.AngleDegrees.ToString("0.#", CultureInfo.InvariantCulture)} would make the best axis found vertical)");
            // Turns and mirror happen about the midline, so it ends on a vertical line through the same point.
            (frameCx, frameCy) = (midline.CentreX, midline.CentreY);
        }
        var adjustment = OutputFrame.Adjustment(midline?.AngleDegrees ?? 0, options.Frame.RotateDegrees, options.Frame.Mirror, frameCx, frameCy);
        if (adjustment != Transform2D.Identity)
        {
            chain = Reexpress(chain, adjustment);
            if (chainBefore is not null) chainBefore = Reexpress(chainBefore, adjustment);
        }

        // 4. The output grid: the frame at the output voxel size, cropped to the tissue of every placed section plus a margin.
        var workToOut = Resampler.EdgeAlignedScale(workUm / outUm);
        var canvasBox = PlaneBox.Empty;
        var tissueBox = PlaneBox.Empty;
        for (int n = 0; n < working.Count; n++)
        {
            if (chain[n].Route == LinkRoute.Failed) continue;
            var map = working[n].FullToWork.Then(chain[n].ToReference).Then(workToOut);
            var e = working[n].Entry.Image!;
            foreach (var (x, y) in new[] { (-0.5, -0.5), (e.Width - 0.5, -0.5), (-0.5, e.Height - 0.5), (e.Width - 0.5, e.Height - 0.5) })
            {
                var p = map.Apply(x, y);
                canvasBox = canvasBox.Including(p.X, p.Y);
            }
            if (working[n].Prepared is { } prepared)
            {
                var mask = OutputFrame.WithoutSpecks(prepared.TissueMask, prepared.WorkImage.Width, prepared.WorkImage.Height);
                var box = OutputFrame.TissueBox(mask, prepared.WorkImage.Width, prepared.WorkImage.Height,
                    prepared.FullToWork.Inverse().Then(chain[n].ToReference).Then(workToOut));
                if (!box.IsEmpty) tissueBox = tissueBox.Including(box.MinX, box.MinY).Including(box.MaxX, box.MaxY);
            }
        }
        bool cropped = options.Frame.CropToTissue && !tissueBox.IsEmpty;
        if (options.Frame.CropToTissue && tissueBox.IsEmpty && aligned)
            warnings.Add("no tissue was found to crop to; the grid holds every section's whole image");
        var gridBox = cropped ? tissueBox.Grown(options.Frame.MarginUm / outUm).Intersect(canvasBox) : canvasBox;
        double minX = gridBox.MinX, minY = gridBox.MinY;
        if (onTemplate is not null && templateGrid)
        {
            // The template's own lattice: the grid's voxel centres fall on template voxel centres (x_plane = a·x + b per axis).
            var outToPlane = workToOut.Inverse().Then(onTemplate.PlaneToWork.Inverse());
            minX = (Math.Floor(outToPlane.M00 * (minX + 0.5) + outToPlane.M02 + 1e-9) - outToPlane.M02) / outToPlane.M00 - 0.5;
            minY = (Math.Floor(outToPlane.M11 * (minY + 0.5) + outToPlane.M12 + 1e-9) - outToPlane.M12) / outToPlane.M11 - 0.5;
        }
        int nx = Math.Max(1, (int)Math.Ceiling(gridBox.MaxX - minX - 1e-9));
        int ny = Math.Max(1, (int)Math.Ceiling(gridBox.MaxY - minY - 1e-9));
        var toGrid = Transform2D.Translation(-minX - 0.5, -minY - 0.5);
        double firstPosition = series.Sections[0].PositionUm;
        double lastPlane = series.Sections.Max(s => Math.Round((s.PositionUm - firstPosition) / series.SpacingUm));
        if (!(lastPlane < MaxPlanes))
            throw new InputProblemException(options.Input,
                $"the section positions span {lastPlane + 1:0} planes at {series.SpacingUm} µm spacing, more than {MaxPlanes}",
                "check the position_um column and the spacing (both in µm)");
        var zIndex = series.Sections.ToDictionary(s => s.Number, s => (int)Math.Round((s.PositionUm - firstPosition) / series.SpacingUm));
        int nz = zIndex.Values.Max() + 1;
        if ((long)nx * ny * nz > Array.MaxLength)
            throw new InputProblemException(options.Input, $"the output would have {nx}×{ny}×{nz} voxels, more than fits in memory",
                "choose a coarser --output-pixel-size");

        // The tissue's centre (middle of its box in the plane, middle of the stack) goes to the stated world position;
        // with a template, every voxel goes where the template says.
        var centreBox = tissueBox.IsEmpty ? gridBox : tissueBox;
        var tissueCentre = (I: centreBox.CentreX - minX - 0.5, J: centreBox.CentreY - minY - 0.5, K: (nz - 1) / 2.0);
        Affine affine;
        if (onTemplate is not null)
        {
            var gridToPlane = Transform2D.Translation(minX + 0.5, minY + 0.5).Then(workToOut.Inverse()).Then(onTemplate.PlaneToWork.Inverse());
            double dz = onTemplate.Direction * series.SpacingUm / 1000 / template!.PlaneSpacingMm;
            affine = Affine.FromRows([gridToPlane.M00, gridToPlane.M01, 0, gridToPlane.M02], [gridToPlane.M10, gridToPlane.M11, 0, gridToPlane.M12],
                [0, 0, dz, onTemplate.FirstPlane]).Then(template.VoxelToWorld);
        }
        else
            affine = OutputFrame.PlacePointAt(
                Affine.FromAxes(options.Axes, outUm / 1000, outUm / 1000, series.SpacingUm / 1000, nx, ny, nz), tissueCentre, options.Frame.CentreMm);
        var tissueCentreWorld = affine.Apply(tissueCentre.I, tissueCentre.J, tissueCentre.K);
        var volume = new Volume(nx, ny, nz, affine);

        // 5. Render every placed section at the output resolution.
        var records = new List<SectionRecord>();
        var occupied = new Dictionary<int, int>();
        var index = working.Select((w, n) => (w.Entry.Number, n)).ToDictionary(t => t.Number, t => t.n);
        int rendered = 0;
        foreach (var s in series.Sections)
        {
            int k = zIndex[s.Number];
            var record = new SectionRecord
            {
                Number = s.Number,
                File = s.FilePath is null ? null : Path.GetRelativePath(series.Folder, s.FilePath),
                ZIndex = k,
                PositionUm = s.PositionUm,
                PixelSizeUm = s.Status == SectionStatus.Gap ? null : s.PixelSizeUm,
                Damaged = s.Damaged,
                Mirrored = s.MountedMirrored,
                Note = string.IsNullOrEmpty(s.Note) ? null : s.Note,
            };
            if (!index.TryGetValue(s.Number, out int n))
            {
                records.Add(record with { Status = s.Status == SectionStatus.Excluded ? "excluded" : "gap" });
                continue;
            }
            var place = chain[n];
            var pair = place.Pair;
            record = record with
            {
                Confidence = pair?.Confidence,
                Ncc = pair?.Best.Ncc,
                PeakToSidelobe = pair?.Best.PeakToSidelobe,
                RegisteredTo = place.LinkedTo >= 0 ? working[place.LinkedTo].Entry.Number : null,
                Route = place.Route.ToString().ToLowerInvariant() switch { "secondneighbour" => "second-neighbour", "partreference" => "part-reference", var r => r },
                Part = place.Part != 0 && place.Route != LinkRoute.Failed ? place.Part : null,
                RouteDisagreementUm = place.RouteDisagreement is { } d ? d * workUm : null,
                RunnerUp = pair?.RunnerUp is { } ru ? new HypothesisRecord(ru.Mirrored, ru.RotationDegrees, ru.Ncc, ru.Mirrored != pair.Best.Mirrored) : null,
                DriftCorrectionUm = smoothing is null || place.Route is LinkRoute.Failed or LinkRoute.Template || place.Part != 0 ? null : smoothing.CorrectionPx[n] * workUm,
                Template = onTemplate is null ? null : TemplateRecord(onTemplate, n, workUm, working[n].Image),
                SideMargin = parity is null || double.IsInfinity(parity.Margin[n]) ? null : Math.Round(parity.Margin[n], 4),
                NccBefore = place.LinkedTo >= 0 && working[n].Prepared is { } a && working[place.LinkedTo].Prepared is { } b
                    ? CentredNcc(a.WorkImage, b.WorkImage) : null,
                Pairs = smoothing?.Pairs.Where(d => d.Moving == n || d.Fixed == n).Select(d => new PairLinkRecord
                {
                    With = working[d.Moving == n ? d.Fixed : d.Moving].Entry.Number,
                    Confidence = d.Confidence,
                    Weight = d.Weight,
                    ResidualUm = d.ResidualPx * workUm,
                    Hypothesis = d.UsedRunnerUp ? "runner-up" : "best",
                    Outlier = d.Outlier,
                }).ToList(),
            };
            if (place.Route == LinkRoute.Failed)
            {
                records.Add(record with { Status = "failed", Note = Join(record.Note, "no confident match with a neighbour; plane left empty") });
                continue;
            }
            if (occupied.TryGetValue(k, out int other))
                warnings.Add($"sections {other} and {s.Number} fall on the same plane {k}; the later one is kept — check the positions or the spacing");
            occupied[k] = s.Number;

            var imageToPlane = working[n].FullToWork.Then(place.ToReference).Then(workToOut).Then(toGrid);
            var full = s.Image!;
            double scale = s.PixelSizeUm / outUm;
            int? loadSide = scale < 1 ? Math.Max(1, (int)Math.Ceiling(Math.Max(full.Width, full.Height) * scale)) : null;
            var loaded = SectionImageReader.ReadSection(s.FilePath!, new ImageReadOptions { Channel = options.Channel, MaxLongSide = loadSide });
            var image = loaded.Image;
            float fill = (float)(image.BorderMedian() * maxValue);
            ScaleInPlace(image, (float)maxValue);
            StackRenderer.RenderSection(volume, new PlacedSection(k, imageToPlane), image,
                Resampler.FullToBlockReduced((int)loaded.Downsample), fill, options.Interpolation);
            records.Add(record with
            {
                Status = aligned ? "aligned" : "placed",
                Mirrored = imageToPlane.IsMirrored,
                RotationDegrees = imageToPlane.RotationDegrees,
                ShiftPx = [imageToPlane.M02, imageToPlane.M12],
                Matrix = imageToPlane.ToRows(),
                ChainRotationDegrees = chainBefore is null || chainBefore[n].Route == LinkRoute.Failed ? null : ChainMap(chainBefore[n]).RotationDegrees,
                ChainShiftPx = chainBefore is null || chainBefore[n].Route == LinkRoute.Failed ? null : [ChainMap(chainBefore[n]).M02, ChainMap(chainBefore[n]).M12],
            });
            Transform2D ChainMap(ChainPlacement p) => working[n].FullToWork.Then(p.ToReference).Then(workToOut).Then(toGrid);
            progress?.Report($"rendering: section {s.Number} ({++rendered}/{working.Count})");
        }
        // Only aligned planes are interpolated between: in a volume placed as scanned the neighbours do not line up.
        var fillMethod = aligned ? options.Fill : GapFill.None;
        if (fillMethod != GapFill.None)
        {
            var good = records.Where(r => r.Status is "aligned" or "placed").Select(r => r.ZIndex).ToHashSet();
            for (int r = 0; r < records.Count; r++)
            {
                var record = records[r];
                if (record.Status is "aligned" or "placed" || good.Contains(record.ZIndex)) continue;
                int below = good.Where(z => z < record.ZIndex).DefaultIfEmpty(-1).Max();
                int above = good.Where(z => z > record.ZIndex).DefaultIfEmpty(-1).Min();
                if (below < 0 || above < 0) continue;
                double t = (record.ZIndex - below) / (double)(above - below);
                var plane = GapFiller.Interpolate(volume.Plane(below), volume.Plane(above), nx, ny, t, fillMethod);
                plane.CopyTo(volume.Plane(record.ZIndex));
                int from = records.First(x => x.ZIndex == below && x.Status is "aligned" or "placed").Number;
                int to = records.First(x => x.ZIndex == above && x.Status is "aligned" or "placed").Number;
                records[r] = record with { Filled = fillMethod == GapFill.Flow ? "flow" : "linear", FilledFrom = [from, to] };
            }
        }
        // A requested plane spacing: resample along the sections with the same interpolation as the gaps.
        string zResampling = "none";
        if (zSpacingUm is double voxelUm && Math.Abs(voxelUm - series.SpacingUm) > 1e-9 * voxelUm)
        {
            var method = aligned && options.Fill != GapFill.None ? options.Fill : GapFill.Linear;
            volume = ZResampler.ResampleZ(volume, voxelUm / 1000, method);
            affine = volume.Affine;
            nz = volume.Nz;
            zResampling = $"{method.ToString().ToLowerInvariant()}, {Num(series.SpacingUm)} µm → {Num(voxelUm)} µm";
            for (int r = 0; r < records.Count; r++) records[r] = records[r] with { VolumeZ = records[r].ZIndex * series.SpacingUm / voxelUm };
        }
        RoundInPlace(volume.Voxels, (float)maxValue);

        int failed = records.Count(r => r.Status == "failed");
        if (failed > 0) warnings.Add($"{failed} section(s) could not be matched to a neighbour and were left out (status 'failed' in the sidecar): " +
            string.Join(", ", records.Where(r => r.Status == "failed").Select(r => r.Number.ToString(CultureInfo.InvariantCulture))));

        var sizes = affine.VoxelSizes;
        var parameters = new Dictionary<string, string>
        {
            ["output_pixel_size_um"] = Num(outUm),
            ["registration_pixel_size_um"] = Num(workUm),
            ["interpolation"] = options.Interpolation.ToString().ToLowerInvariant(),
            ["channel"] = options.Channel.ToString().ToLowerInvariant(),
            ["alignment"] = aligned ? "neighbour chain: phase correlation, any angle, mirror tested" : "none (sections placed centred, unaligned)",
            ["work_size_px"] = options.Registration.WorkSize.ToString(CultureInfo.InvariantCulture),
            ["min_confidence"] = Num(options.Chain.MinConfidence),
            ["fft"] = Fft2D.ProviderName,
            ["smoothing"] = smoothing is null ? "off" : Num(options.Smoothing.Strength),
            ["fill"] = fillMethod.ToString().ToLowerInvariant(),
            ["z_resampling"] = zResampling,
            ["template"] = onTemplate is null ? "none" : "sections matched to template slices by normalised mutual information; the template sets the course over 11 sections, the chain the detail",
        };
        if (smoothing is not null)
        {
            parameters["route_closure_slow_share"] = double.IsNaN(smoothing.SlowClosureShare) ? "too few sections to tell"
                : $"{Num(Math.Round(smoothing.SlowClosureShare, 3))}, limit {Num(Math.Round(smoothing.SlowClosureLimit, 3))}";
            parameters["second_neighbour_weight"] = Num(smoothing.LongPairWeight);
        }
        var buildRecord = new BuildRecord
        {
            Version = Version,
            Created = DateTime.UtcNow.ToString("yyyy-MM-ddTHH:mm:ssZ", CultureInfo.InvariantCulture),
            Input = series.ManifestPath ?? series.Folder,
            Aligned = aligned,
            Dimensions = [nx, ny, nz],
            VoxelSizeMm = [sizes.I, sizes.J, sizes.K],
            AxisCodes = affine.AxisCodes.Code,
            Affine = affine.ToRows(),
            InputPixelSizeUm = series.PixelSizeUm,
            SpacingUm = series.SpacingUm,
            ReferenceSection = working[frameIndex].Entry.Number,
            Frame = new FrameRecord
            {
                ReferenceSection = working[frameIndex].Entry.Number,
                ReferenceChosenBy = onTemplate is not null ? "the neighbour chain; the frame is the template's"
                    : options.Frame.ReferenceSection is null
                    ? (aligned ? "the section nearest the middle of the stack that matched its neighbours confidently" : "the first section")
                    : "--reference",
                FaceFlipped = faceFlipped,
                Upright = midline is null ? null : new UprightRecord
                {
                    AngleDegrees = midline.AngleDegrees,
                    Symmetry = midline.Symmetry,
                    RunnerUpSymmetry = midline.RunnerUpSymmetry,
                    SectionsUsed = midline.PlanesUsed,
                },
                RotateDegrees = options.Frame.RotateDegrees,
                Mirror = options.Frame.Mirror,
                Crop = cropped ? "tissue" : "canvas",
                MarginUm = cropped ? options.Frame.MarginUm : null,
                TissueBoxVoxels = tissueBox.IsEmpty ? null
                    : [tissueBox.MinX - minX - 0.5, tissueBox.MinY - minY - 0.5, tissueBox.MaxX - minX - 0.5, tissueBox.MaxY - minY - 0.5],
                TissueCentreMm = [tissueCentreWorld.X, tissueCentreWorld.Y, tissueCentreWorld.Z],
                Template = onTemplate is null ? null : new TemplateFrameRecord
                {
                    File = Path.GetFullPath(options.Template!.Path),
                    CutAxis = options.Template.CutAxis.ToString(),
                    FirstPlane = onTemplate.FirstPlane,
                    Reverse = options.Template.Reverse,
                    Grid = templateGrid ? "template" : "sections",
                    Mirrored = onTemplate.Guide.Mirrored,
                    GlobalAgreement = onTemplate.Guide.GlobalAgreement,
                    Measured = onTemplate.Guide.MeasuredCount,
                    Outliers = onTemplate.Guide.OutlierCount,
                    ChainSteps = (onTemplate.Guide.ChainSteps ?? []).Select(i => working[i].Entry.Number).ToList(),
                },
            },
            Parameters = parameters,
            Warnings = warnings,
            Sections = records,
        };
        return new BuildResult(volume, buildRecord, bits);
    }

    /// <summary>The sections placed on a template: the fused placements (template plane pixels at working scale) and the record of how.</summary>
    private sealed record TemplatePlacement(IReadOnlyList<ChainPlacement> Chain, IReadOnlyList<ChainPlacement> ChainBefore, TemplateGuideResult Guide,
        double[] Z, double FirstPlane, double Direction, Transform2D PlaneToWork);

    /// <summary>
    /// Every section matched to the template slice at its depth and the stack's course fused with the template's
    /// (<see cref="TemplateGuide"/>). Section depth: template plane = first plane ± (position − first position) / plane spacing.
    /// </summary>
    /// <summary>The template slice at each section's depth (null where the template does not reach), all in one pixel frame.</summary>
    private sealed record TemplateSlices(double[] Z, GrayImage?[] Slices, Transform2D SliceToPlane, double FirstPlane, double Direction);

    /// <summary>Section depth: template plane = first plane ± (position − first position) / plane spacing.</summary>
    private static TemplateSlices SliceTemplate(TemplateVolume template, TemplateOptions o, SectionSeries series, List<Working> working, double workUm,
        IProgress<string>? progress)
    {
        var (firstPlane, direction) = TemplateDepths(template, o, series);
        double first = series.Sections[0].PositionUm, perUm = 1 / 1000.0 / template.PlaneSpacingMm;
        var z = working.Select(w => firstPlane + direction * (w.Entry.PositionUm - first) * perUm).ToArray();
        int inside = z.Count(template.ContainsPlane);
        var slices = new GrayImage?[working.Count];
        var sliceToPlane = Transform2D.Identity;
        object gate = new();
        int done = 0;
        Parallel.For(0, working.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            if (!template.ContainsPlane(z[n])) return;
            slices[n] = template.Slice(z[n], workUm / 1000, out var map);
            lock (gate) sliceToPlane = map;
            progress?.Report($"template: slice {Interlocked.Increment(ref done)}/{inside}");
        });
        return new TemplateSlices(z, slices, sliceToPlane, firstPlane, direction);
    }

    /// <summary>Sections spread over the stack whose template matches say how the series' face up looks on the template.</summary>
    public const int SideVoteSample = 12;

    /// <summary>A section whose side margin from the pairs is below this also has its side put to the template's vote.</summary>
    public const double SideVoteMargin = 0.25;

    /// <summary>
    /// Weight of the template's side vote against the pairs' evidence (weighted Fisher z): the vote is this times the
    /// relative lead of the better mirror's similarity, (s_better − s_other) / s_better.
    /// </summary>
    public const double SideVoteWeight = 1.0;

    /// <summary>Template matches from scratch, with both mirrors measured, of the sections whose side is uncertain and of a spread sample.</summary>
    private static TemplateMatch?[] TemplateSideMatches(List<Working> working, TemplateSlices slices, ParityResult parity, IProgress<string>? progress)
    {
        var with = Enumerable.Range(0, working.Count).Where(n => slices.Slices[n] is not null).ToList();
        var chosen = new SortedSet<int>(with.Where(n => parity.Margin[n] < SideVoteMargin));
        int count = Math.Min(SideVoteSample, with.Count);
        for (int t = 0; t < count; t++) chosen.Add(with[(int)Math.Round((t + 0.5) * with.Count / count - 0.5)]);
        progress?.Report($"template: {chosen.Count} sections matched from scratch for which side is up");
        var options = new TemplateRegistrationOptions { MeasureOtherMirror = true };
        var matches = new TemplateMatch?[working.Count];
        Parallel.ForEach(chosen, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount },
            n => matches[n] = TemplateRegistration.Register(working[n].Image, slices.Slices[n]!, null, options));
        return matches;
    }

    /// <summary>A template match's vote on its section's side; null when neither mirror matches (similarity below the guide's floor).</summary>
    private static SideVote? SideVoteOf(TemplateMatch m)
    {
        double best = m.Similarity, other = m.OtherMirrorSimilarity ?? best;
        if (Math.Max(best, other) < new TemplateGuideOptions().MinSimilarity) return null;
        double lead = SideVoteWeight * (best - other) / Math.Max(best, other);
        return m.Mirrored ? new SideVote(0, lead) : new SideVote(lead, 0);
    }

    private static TemplatePlacement PlaceOnTemplate(TemplateVolume template, TemplateOptions o, SectionSeries series, List<Working> working,
        IReadOnlyList<ChainPlacement> chain, double[]? sideMargin, double workUm, TemplateSlices? sliced, TemplateMatch?[]? scratch, IProgress<string>? progress)
    {
        sliced ??= SliceTemplate(template, o, series, working, workUm, progress);
        var (z, slices, sliceToPlane, firstPlane, direction) = (sliced.Z, sliced.Slices, sliced.SliceToPlane, sliced.FirstPlane, sliced.Direction);
        progress?.Report("template: matching sections to their slices");
        var guide = TemplateGuide.Place(new TemplateGuideInput(working.Select((w, n) => new TemplateGuideSection(
            z[n], w.Image, chain[n].ToReference, slices[n], PartEdge(chain, n) ? 0 : chain[n].Pair?.Confidence ?? 1, ChainFailed: chain[n].Route == LinkRoute.Failed,
            Unanchored: chain[n].Route != LinkRoute.Failed && chain[n].Part != 0,
            SideUncertain: sideMargin is not null && sideMargin[n] < MirrorParity.UncertainMargin,
            // The link's error from its two routes' disagreement (each route errs; the difference has √2 times their spread).
            LinkErrorPx: chain[n].AnyRouteDisagreement is double d ? d / Math.Sqrt(2) : null, Scratch: scratch?[n])).ToList()));
        var planeToWork = Transform2D.Scale(template.PixelWidthMm * 1000 / workUm, template.PixelHeightMm * 1000 / workUm);
        // A section the chain could not place takes its own template match when the guide accepted it (route 'template').
        var fused = chain.Select((c, n) => c.Route == LinkRoute.Failed
            ? guide.Sections[n].PlacedByTemplate
                ? new ChainPlacement(guide.Sections[n].SectionToSlice.Then(sliceToPlane).Then(planeToWork), LinkRoute.Template, -1, null, null, 0)
                : c
            : c with { ToReference = guide.Sections[n].SectionToSlice.Then(sliceToPlane).Then(planeToWork) }).ToList();
        var before = chain.Select((c, n) => c.Route == LinkRoute.Failed ? c
            : c with { ToReference = guide.Sections[n].ChainToSlice.Then(sliceToPlane).Then(planeToWork) }).ToList();
        return new TemplatePlacement(fused, before, guide, z, firstPlane, direction, planeToWork);
    }

    /// <summary>True where section <paramref name="n"/> belongs to another part of the chain than the placed section before it.</summary>
    private static bool PartEdge(IReadOnlyList<ChainPlacement> chain, int n)
    {
        if (chain[n].Route == LinkRoute.Failed) return false;
        for (int j = n - 1; j >= 0; j--)
            if (chain[j].Route != LinkRoute.Failed) return chain[j].Part != chain[n].Part;
        return false;
    }

    /// <summary>Below this share of agreeing sections in the global search, the build warns that the template may be set up wrongly.</summary>
    private const double MinTemplateAgreement = 0.5;

    /// <summary>
    /// The template plane of the first section and the direction of increasing section numbers. Default first plane:
    /// the series centred on the template along the cut axis (rounded to a whole plane with --template-grid, so the
    /// volume's planes fall on the template's).
    /// </summary>
    private static (double FirstPlane, double Direction) TemplateDepths(TemplateVolume template, TemplateOptions o, SectionSeries series)
    {
        double first = series.Sections[0].PositionUm, last = series.Sections.Max(s => s.PositionUm);
        double direction = o.Reverse ? -1 : 1;
        double centred = (template.Planes - 1) / 2.0 - direction * (last - first) / 1000 / template.PlaneSpacingMm / 2;
        return (o.FirstPlane ?? (o.TemplateGrid ? Math.Round(centred) : centred), direction);
    }

    /// <summary>Refuses a template the sections do not fall inside (fewer than three, or fewer than all when there are fewer than three).</summary>
    private static void CheckTemplateDepths(TemplateVolume template, TemplateOptions o, SectionSeries series, IReadOnlyList<SectionEntry> present)
    {
        var (firstPlane, direction) = TemplateDepths(template, o, series);
        double first = series.Sections[0].PositionUm;
        var z = present.Select(s => firstPlane + direction * (s.PositionUm - first) / 1000 / template.PlaneSpacingMm).ToArray();
        int inside = z.Count(template.ContainsPlane);
        if (inside < Math.Min(3, present.Count))
            throw new InputProblemException(o.Path,
                $"only {inside} of {present.Count} sections fall inside the template: they lie at template planes {z.Min():0.#} to {z.Max():0.#} along axis {o.CutAxis}, and the template has planes 0 to {template.Planes - 1} ({template.PlaneSpacingMm:0.###} mm apart)",
                "check --template-axis (the template's axis the sections were cut along), --template-first-plane and the section spacing");
    }

    private static SectionTemplateRecord TemplateRecord(TemplatePlacement t, int n, double workUm, GrayImage image)
    {
        var p = t.Guide.Sections[n];
        double cx = (image.Width - 1) / 2.0, cy = (image.Height - 1) / 2.0;
        double? misfit = null;
        if (p.Measured is { } measured)
        {
            var (ax, ay) = measured.Apply(cx, cy);
            var (bx, by) = p.SectionToSlice.Apply(cx, cy);
            misfit = Math.Sqrt((ax - bx) * (ax - bx) + (ay - by) * (ay - by)) * workUm;
        }
        return new SectionTemplateRecord
        {
            Plane = t.Z[n],
            Matched = p.Measured is not null,
            Similarity = p.Similarity,
            Confidence = p.Measured is null ? null : p.Confidence,
            ResidualUm = p.ResidualPx * workUm,
            ResidualDegrees = p.ResidualDegrees,
            Outlier = p.Outlier ? p.Reason ?? "outlier" : null,
            Note = p.PlacedByTemplate || (!p.Outlier && p.Measured is null) ? p.Reason : null,
            PlacedByTemplate = p.PlacedByTemplate,
            ChainStep = t.Guide.ChainSteps?.Contains(n) == true,
            // Nothing was corrected for a section left out; one placed by its own match was moved all the way to it.
            CorrectionUm = t.Chain[n].Route == LinkRoute.Failed ? null
                : p.PlacedByTemplate ? p.ResidualPx * workUm : Math.Sqrt(p.CorrectionX * p.CorrectionX + p.CorrectionY * p.CorrectionY) * workUm,
            CorrectionDegrees = t.Chain[n].Route == LinkRoute.Failed ? null : p.PlacedByTemplate ? p.ResidualDegrees : p.CorrectionDegrees,
            MisfitUm = misfit,
        };
    }

    /// <summary>With a template the frame is the template's: the options that choose a frame are refused, not ignored.</summary>
    private static void CheckTemplateCombination(BuildOptions options)
    {
        var f = options.Frame;
        var clash = new List<string>();
        if (f.ReferenceSection is not null) clash.Add("--reference");
        if (f.RotateDegrees != 0) clash.Add("--rotate");
        if (f.Mirror) clash.Add("--mirror");
        if (f.Upright) clash.Add("--upright");
        if (f.CentreMm != default) clash.Add("--centre");
        if (!options.Align) clash.Add("--no-align");
        if (clash.Count > 0)
            throw new InputProblemException(options.Template!.Path, $"{string.Join(", ", clash)} cannot be combined with --template: the template decides the frame",
                $"leave out {string.Join(" and ", clash)}, or build without --template");
    }

    /// <summary>Most sections handed to the midline search (evenly spread over the stack).</summary>
    private const int MidlineSections = 48;

    /// <summary>
    /// The specimen's midline in the frame (reference-section working pixels): every placed section's prepared image
    /// (tissue bright on dark) laid into one canvas holding them all, handed to <see cref="Midline.Estimate"/>.
    /// </summary>
    private static MidlineResult FindMidline(List<Working> working, IReadOnlyList<ChainPlacement> chain)
    {
        var placed = Enumerable.Range(0, working.Count).Where(n => chain[n].Route != LinkRoute.Failed && working[n].Prepared is not null).ToList();
        if (placed.Count > MidlineSections)
            placed = Enumerable.Range(0, MidlineSections).Select(i => placed[(int)Math.Round(i * (placed.Count - 1) / (double)(MidlineSections - 1))]).Distinct().ToList();
        var box = PlaneBox.Empty;
        foreach (int n in placed)
        {
            var image = working[n].Prepared!.WorkImage;
            var map = working[n].Prepared!.FullToWork.Inverse().Then(chain[n].ToReference);
            foreach (var (x, y) in new[] { (-0.5, -0.5), (image.Width - 0.5, -0.5), (-0.5, image.Height - 0.5), (image.Width - 0.5, image.Height - 0.5) })
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
            var prepared = working[placed[i]].Prepared!;
            var map = prepared.FullToWork.Inverse().Then(chain[placed[i]].ToReference).Then(toCanvas);
            planes[i] = Resampler.Warp(prepared.WorkImage, map.Inverse(), w, h, 0f);
            weights[i] = prepared.TissueFraction;
        });
        var result = Midline.Estimate(planes, weights);
        // Back from the canvas to the frame's own pixels.
        return result with { CentreX = result.CentreX + box.MinX + 0.5, CentreY = result.CentreY + box.MinY + 0.5 };
    }

    /// <summary>Every placement followed by <paramref name="map"/> (the frame changed for all sections at once).</summary>
    private static IReadOnlyList<ChainPlacement> Reexpress(IReadOnlyList<ChainPlacement> chain, Transform2D map) =>
        chain.Select(c => c.Route == LinkRoute.Failed ? c : c with { ToReference = c.ToReference.Then(map) }).ToList();

    /// <summary>Refuses a --reference that names no section with an image, before any work is done.</summary>
    private static void CheckReferenceSection(BuildOptions options, SectionSeries series)
    {
        if (options.Frame.ReferenceSection is not int wanted) return;
        var entry = series.Sections.FirstOrDefault(s => s.Number == wanted);
        string first = series.Sections.FirstOrDefault(s => s.Status == SectionStatus.Present)?.Number.ToString(CultureInfo.InvariantCulture) ?? "?";
        if (entry is null)
            throw new InputProblemException(options.Input, $"--reference {wanted}: the series has no section {wanted} (its sections run from {series.Sections[0].Number} to {series.Sections[^1].Number})",
                $"give the number of a section that was scanned, e.g. --reference {first}");
        if (entry.Status != SectionStatus.Present || entry.Image is null)
            throw new InputProblemException(options.Input, $"--reference {wanted}: section {wanted} is {(entry.Status == SectionStatus.Excluded ? "excluded" : "missing")}, so it has no image to take the frame from",
                $"give the number of a section that was scanned, e.g. --reference {first}");
    }

    private static string Join(string? a, string b) => string.IsNullOrEmpty(a) ? b : $"{a}; {b}";

    private static List<Working> LoadWorking(List<SectionEntry> present, BuildOptions options, double largestUm,
        IProgress<string>? progress, out double workUm)
    {
        int workSize = Math.Max(16, options.Registration.WorkSize);
        double target = largestUm / workSize;
        // Every section is brought to one pixel size so pairwise maps stay rigid; that size is the coarsest the
        // block reduction gives, never coarser than needed for the work size.
        var loaded = new (SectionEntry Entry, LoadedSection Section)[present.Count];
        int done = 0;
        Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            var s = present[n];
            int factor = Math.Max(1, (int)Math.Floor(target / s.PixelSizeUm));
            int side = Math.Max(1, (int)Math.Ceiling(Math.Max(s.Image!.Width, s.Image!.Height) / (double)factor));
            loaded[n] = (s, SectionImageReader.ReadSection(s.FilePath!, new ImageReadOptions { Channel = options.Channel, MaxLongSide = side }));
            progress?.Report($"loading: {Interlocked.Increment(ref done)}/{present.Count} sections");
        });
        workUm = loaded.Max(l => l.Entry.PixelSizeUm * l.Section.Downsample);
        double common = workUm;
        var result = new Working[present.Count];
        Parallel.For(0, present.Count, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, n =>
        {
            var (entry, section) = loaded[n];
            var fullToLoaded = Resampler.FullToBlockReduced((int)section.Downsample);
            double loadedUm = entry.PixelSizeUm * section.Downsample;
            GrayImage image = section.Image;
            var fullToWork = fullToLoaded;
            if (Math.Abs(loadedUm - common) > 1e-9 * common)
            {
                double s = loadedUm / common;
                var loadedToWork = Resampler.EdgeAlignedScale(s);
                int w = Math.Max(1, (int)Math.Round(image.Width * s)), h = Math.Max(1, (int)Math.Round(image.Height * s));
                image = Resampler.Warp(image, loadedToWork.Inverse(), w, h, image.BorderMedian());
                fullToWork = fullToLoaded.Then(loadedToWork);
            }
            if (options.Align && Math.Max(image.Width, image.Height) < MinRegistrationSide)
                throw new InputProblemException(entry.FilePath,
                    $"is only {image.Width}×{image.Height} pixels at the registration pixel size ({common:0.###} µm), too small to register",
                    "check this section's pixel size against the others, or leave it out with exclude=yes in the manifest");
            var prepared = options.Align ? SectionRegistration.Prepare(image, options.Registration with { WorkSize = Math.Max(image.Width, image.Height) }) : null;
            result[n] = new Working(entry, fullToWork, image, prepared);
        });
        return [.. result];
    }

    private static ConcurrentDictionary<(int, int), PairResult> RegisterNeighbours(List<Working> working, BuildOptions options, IProgress<string>? progress)
    {
        var jobs = new List<(int Moving, int Fixed)>();
        for (int i = 1; i < working.Count; i++)
            for (int d = 1; d <= Math.Min(i, MirrorParity.MaxReach); d++)
                jobs.Add((i, i - d));
        var pairs = new ConcurrentDictionary<(int, int), PairResult>();
        int done = 0;
        Parallel.ForEach(jobs, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, job =>
        {
            pairs[job] = RegisterPair(working, job.Moving, job.Fixed, options);
            progress?.Report($"registering: {Interlocked.Increment(ref done)}/{jobs.Count} pairs");
        });
        return pairs;
    }

    private static PairResult RegisterPair(List<Working> working, int moving, int fixedIndex, BuildOptions options)
    {
        bool? a = working[moving].Entry.MountedMirrored, b = working[fixedIndex].Entry.MountedMirrored;
        var o = options.Registration with { KnownMirrored = a is { } ma && b is { } mb ? ma != mb : null };
        return SectionRegistration.Register(working[fixedIndex].Prepared!, working[moving].Prepared!, o);
    }

    /// <summary>The centre and the corners of the middle half of a section: where the solver measures disagreement.</summary>
    private static (double X, double Y)[] SamplePoints(GrayImage image)
    {
        double w = image.Width - 1, h = image.Height - 1;
        return [(w / 2, h / 2), (w / 4, h / 4), (3 * w / 4, h / 4), (w / 4, 3 * h / 4), (3 * w / 4, 3 * h / 4)];
    }

    private static (double X, double Y)[] Corners(GrayImage image) =>
        [(0, 0), (image.Width - 1, 0), (0, image.Height - 1), (image.Width - 1, image.Height - 1)];

    /// <summary>Centres one image on another (for unaligned placement).</summary>
    private static Transform2D CentreOn(GrayImage image, GrayImage reference) =>
        Transform2D.Translation((reference.Width - image.Width) / 2.0, (reference.Height - image.Height) / 2.0);

    /// <summary>
    /// Most sections are mounted face up (common practice), so when more than half came out mirrored relative to
    /// the reference, the reference itself was the mirrored one: flip the frame about the reference's centre.
    /// A manifest that says how the reference was mounted overrides the vote.
    /// </summary>
    private static IReadOnlyList<ChainPlacement> FaceMajorityUp(IReadOnlyList<ChainPlacement> chain, List<Working> working, out bool flip)
    {
        int referenceIndex = chain.Select((c, i) => (c, i)).First(t => t.c.Route == LinkRoute.Reference).i;
        var placedChain = chain.Where(c => c.Route != LinkRoute.Failed).ToList();
        flip = working[referenceIndex].Entry.MountedMirrored
            ?? placedChain.Count(c => c.ToReference.IsMirrored) * 2 > placedChain.Count;
        if (!flip) return chain;
        var r = working[referenceIndex].Image;
        var mirror = Transform2D.MirrorX((r.Width - 1) / 2.0);
        return chain.Select(c => c.Route == LinkRoute.Failed ? c : c with { ToReference = c.ToReference.Then(mirror) }).ToList();
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


    private static void ScaleInPlace(GrayImage image, float factor)
    {
        var p = image.Pixels;
        for (int i = 0; i < p.Length; i++) p[i] *= factor;
    }

    private static void RoundInPlace(float[] values, float max)
    {
        for (int i = 0; i < values.Length; i++) values[i] = Math.Clamp(MathF.Round(values[i]), 0, max);
    }
}
