using System.Globalization;
using System.Text;
using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.Metadata;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Demo;

/// <summary>How a trusted volume is cut into a synthetic section series with ground truth (<see cref="VolumeCutter"/>).</summary>
public sealed record CutOptions
{
    /// <summary>The volume's voxel axis the knife advances along: 'i', 'j' or 'k'.</summary>
    public char Axis { get; init; } = 'k';
    /// <summary>Keep every k-th plane (1 = every plane).</summary>
    public int Every { get; init; } = 1;
    /// <summary>First and last plane index to cut (inclusive); null = the first and last plane that hold tissue.</summary>
    public int? FromPlane { get; init; }
    public int? ToPlane { get; init; }
    /// <summary>Scan pixel size in µm; null = the volume's finer in-plane voxel size (one scan pixel per voxel).</summary>
    public double? PixelSizeUm { get; init; }
    /// <summary>Canvas side as a multiple of the larger plane side (room for turned and shifted sections).</summary>
    public double CanvasScale { get; init; } = 1.5;
    /// <summary>Largest shift of a section's centre from the canvas centre, as a share of the canvas side (each axis).</summary>
    public double MaxShift { get; init; } = 0.15;
    /// <summary>Share of the sections mounted face down (at least one when the share is above 0).</summary>
    public double FaceDown { get; init; } = 0.1;
    /// <summary>Share of the sections lost (never scanned); above 0, one of them is next to each end.</summary>
    public double Lost { get; init; } = 0.05;
    /// <summary>Each section's stain gain is drawn from [1 − GainSpread, 1 + GainSpread].</summary>
    public double GainSpread { get; init; } = 0.25;
    /// <summary>Gaussian noise, standard deviation as a share of the full intensity range.</summary>
    public double Noise { get; init; } = 0.02;
    /// <summary>True: tissue dark on a bright slide (bright-field); false: tissue bright on dark (fluorescence, MRI).</summary>
    public bool BrightField { get; init; }
    /// <summary>8 or 16 bits per pixel.</summary>
    public int Bits { get; init; } = 8;
    /// <summary>Spacing of the sections in µm; null = the voxel size along the axis times <see cref="Every"/>.</summary>
    public double? SpacingUm { get; init; }
    public int Seed { get; init; } = 1;
    /// <summary>
    /// The cutting plane's tilt in degrees about the plane's x axis and then its y axis (<see cref="Template.TemplateVolume.Oblique"/>):
    /// a knife that was not parallel to the volume's voxel planes. Every section is cut at the same tilt; 0, 0 cuts the
    /// voxel planes themselves.
    /// </summary>
    public double TiltXDegrees { get; init; }
    public double TiltYDegrees { get; init; }
    public bool Tilted => TiltXDegrees != 0 || TiltYDegrees != 0;
}

/// <summary>One section of a cut series and where it truly lies.</summary>
/// <param name="Plane">The volume plane index (along the cut axis) the section was cut at.</param>
/// <param name="PlaneToImage">Truth-plane pixels (the volume plane at the scan pixel size) → scan pixels.</param>
public sealed record CutSection(int Number, int Plane, string? FileName, bool Lost, bool Mirrored, double Gain, Transform2D PlaneToImage, double TissueShare);

/// <summary>A cut series in memory: sections and their scans (null for lost ones).</summary>
public sealed record CutSeries(CutOptions Options, string Source, int PlaneWidth, int PlaneHeight, int Canvas, double PixelSizeUm,
    double SpacingUm, IReadOnlyList<CutSection> Sections, IReadOnlyList<GrayImage?> Scans);

/// <summary>
/// Cuts a volume the user trusts (an MRI of the specimen, a public template) into a synthetic serial-section series
/// with ground truth, for checking a build's parameters on data of one's own kind: every k-th plane along a voxel
/// axis over the whole extent that holds tissue (both ends included), each plane resampled to the scan pixel size and
/// laid on a square canvas, turned by any angle, shifted, a share mounted face down (mirrored left-right before the
/// turn), a share lost (one next to each end), each with its own stain gain and noise, written as 8- or 16-bit gray
/// PNG scans with a manifest and a truth.json that <c>stackbuild evaluate</c> reads.
/// </summary>
public static class VolumeCutter
{
    public const string TruthFormat = "stackbuild-cut-truth";
    public const string ManifestFileName = "manifest.csv";
    public const string TruthFileName = "truth.json";
    /// <summary>A plane holds tissue when at least this many voxels are above <see cref="TissueLevel"/> of the volume's range.</summary>
    public const int MinTissueVoxels = 8;
    public const double TissueLevel = 0.1;

    /// <summary>Cuts <paramref name="volume"/> (voxel values as read; scaled by their 0.1 % and 99.9 % quantiles).</summary>
    public static CutSeries Cut(Volume volume, CutOptions options, string source)
    {
        Check(options);
        var planes = Template.TemplateVolume.FromVolume(volume, options.Axis);
        var (low, high) = Range(volume.Voxels);
        double voxelUm = Math.Min(planes.PixelWidthMm, planes.PixelHeightMm) * 1000;
        double pixelUm = options.PixelSizeUm ?? voxelUm;
        double sx = planes.PixelWidthMm * 1000 / pixelUm, sy = planes.PixelHeightMm * 1000 / pixelUm; // scan pixels per voxel
        int width = Math.Max(1, (int)Math.Round(planes.Width * sx)), height = Math.Max(1, (int)Math.Round(planes.Height * sy));
        int canvas = (int)Math.Ceiling(Math.Max(width, height) * options.CanvasScale);
        // Truth-plane pixel → volume-plane voxel, pixel edges kept.
        var truthToVoxel = new Transform2D(1 / sx, 0, 0.5 / sx - 0.5, 0, 1 / sy, 0.5 / sy - 0.5);

        // The plane the knife cuts at plane index k: the voxel plane, or the plane through its centre at the tilt.
        GrayImage Cut(int k) => options.Tilted ? planes.Oblique(k, options.TiltXDegrees, options.TiltYDegrees, (float)low) : planes.Plane(k);
        var tissue = Enumerable.Range(0, planes.Planes).Where(k => TissueVoxels(Cut(k), low, high) >= MinTissueVoxels).ToList();
        if (tissue.Count == 0 && options.FromPlane is null)
            throw new InputProblemException(source, "no plane of the volume holds tissue (all voxels near the lowest value)",
                "give a volume with image data, or name the planes with --from and --to");
        int from = options.FromPlane ?? tissue[0], to = options.ToPlane ?? tissue[^1];
        if (from < 0 || to >= planes.Planes || from > to)
            throw new InputProblemException(source, $"planes {from} to {to} are not within the volume's 0 to {planes.Planes - 1} along axis {options.Axis}",
                $"give --from and --to between 0 and {planes.Planes - 1}");
        var cutPlanes = new List<int>();
        for (int k = from; k <= to; k += options.Every) cutPlanes.Add(k);
        if (cutPlanes.Count < 3)
            throw new InputProblemException(source, $"only {cutPlanes.Count} plane(s) would be cut", "cut along a longer axis or keep more planes (--every)");

        var rng = new DemoRandom(options.Seed, purpose: 41);
        int count = cutPlanes.Count;
        var lost = ChooseLost(count, options.Lost, rng);
        var faceDown = Choose(count, options.FaceDown, rng, lost);
        double c = (canvas - 1) / 2.0;
        var sections = new CutSection[count];
        var scans = new GrayImage?[count];
        var draws = Enumerable.Range(0, count).Select(_ => (Angle: rng.Uniform(-180, 180), Dx: rng.Uniform(-1, 1), Dy: rng.Uniform(-1, 1),
            Gain: rng.Uniform(1 - options.GainSpread, 1 + options.GainSpread))).ToArray();
        Parallel.For(0, count, n =>
        {
            var draw = draws[n];
            var plane = Cut(cutPlanes[n]);
            var centre = (X: (width - 1) / 2.0, Y: (height - 1) / 2.0);
            var move = Transform2D.Translation(c - centre.X, c - centre.Y);
            if (faceDown.Contains(n)) move = move.Then(Transform2D.MirrorX(c));
            move = move.Then(Transform2D.Rotation(draw.Angle, c, c))
                .Then(Transform2D.Translation(draw.Dx * options.MaxShift * canvas, draw.Dy * options.MaxShift * canvas));
            string? file = lost.Contains(n) ? null : $"section_{n + 1:000}.png";
            double share = TissueVoxels(plane, low, high) * sx * sy / ((double)canvas * canvas); // tissue's share of the canvas
            sections[n] = new CutSection(n + 1, cutPlanes[n], file, lost.Contains(n), faceDown.Contains(n), Math.Round(draw.Gain, 4), move, share);
            if (file is null) return;
            var scan = Resampler.Warp(plane, move.Inverse().Then(truthToVoxel), canvas, canvas, (float)low);
            var noise = new DemoRandom(options.Seed, purpose: 42, number: n + 1);
            var p = scan.Pixels;
            for (int i = 0; i < p.Length; i++)
            {
                double v = Math.Clamp((p[i] - low) / (high - low), 0, 1) * draw.Gain;
                double value = options.BrightField ? 0.92 - 0.75 * v : 0.04 + 0.75 * v;
                p[i] = (float)Math.Clamp(value + options.Noise * noise.NextGaussian(), 0, 1);
            }
            scans[n] = scan;
        });
        double spacing = options.SpacingUm ?? planes.PlaneSpacingMm * 1000 * options.Every;
        return new CutSeries(options, source, width, height, canvas, pixelUm, spacing, sections, scans);
    }

    /// <summary>Writes scans, manifest.csv and truth.json into <paramref name="folder"/> (created if missing); each file atomically.</summary>
    public static void Write(CutSeries series, string folder)
    {
        Directory.CreateDirectory(folder);
        int max = series.Options.Bits == 16 ? 65535 : 255;
        Parallel.For(0, series.Sections.Count, n =>
        {
            if (series.Scans[n] is not { } scan) return;
            AtomicFile.WriteAllBytes(Path.Combine(folder, series.Sections[n].FileName!), EncodePng(scan, max, series.PixelSizeUm));
        });
        AtomicFile.WriteAllText(Path.Combine(folder, ManifestFileName), Manifest(series));
        AtomicFile.WriteAllText(Path.Combine(folder, TruthFileName), TruthJson(series));
    }

    /// <summary>Gray PNG (8 or 16 bits) of an image holding 0–1 values, with the pixel size in its pHYs chunk.</summary>
    public static byte[] EncodePng(GrayImage image, int max, double pixelSizeUm)
    {
        using var stream = new MemoryStream();
        if (max > 255)
        {
            var values = new L16[image.Pixels.Length];
            for (int i = 0; i < values.Length; i++) values[i] = new L16((ushort)Math.Clamp(MathF.Round(image.Pixels[i] * max), 0, max));
            using var png = Image.LoadPixelData<L16>(values, image.Width, image.Height);
            SetResolution(png.Metadata, pixelSizeUm);
            png.Save(stream, new PngEncoder { ColorType = PngColorType.Grayscale, BitDepth = PngBitDepth.Bit16 });
        }
        else
        {
            var values = new byte[image.Pixels.Length];
            for (int i = 0; i < values.Length; i++) values[i] = (byte)Math.Clamp(MathF.Round(image.Pixels[i] * max), 0, max);
            using var png = Image.LoadPixelData<L8>(values, image.Width, image.Height);
            SetResolution(png.Metadata, pixelSizeUm);
            png.Save(stream, new PngEncoder { ColorType = PngColorType.Grayscale, BitDepth = PngBitDepth.Bit8 });
        }
        return stream.ToArray();
    }

    private static void SetResolution(ImageMetadata metadata, double pixelSizeUm)
    {
        metadata.ResolutionUnits = PixelResolutionUnit.PixelsPerMeter;
        metadata.HorizontalResolution = metadata.VerticalResolution = 1e6 / pixelSizeUm;
    }

    /// <summary>True when <paramref name="folder"/> holds an earlier cut (its truth.json says so).</summary>
    public static bool IsCutFolder(string folder) => DemoFiles.ReadTruthFormat(Path.Combine(folder, TruthFileName)) == TruthFormat;

    /// <summary>Removes the scans an earlier cut listed in its truth.json (before a new cut replaces it).</summary>
    public static void RemoveEarlierScans(string folder)
    {
        using var doc = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(folder, TruthFileName)));
        foreach (var s in doc.RootElement.GetProperty("sections").EnumerateArray())
            if (s.TryGetProperty("file", out var f) && f.ValueKind == JsonValueKind.String && f.GetString() is { } name
                && name.StartsWith("section_", StringComparison.Ordinal) && name.EndsWith(".png", StringComparison.Ordinal) && !name.Contains('/'))
                File.Delete(Path.Combine(folder, name));
    }

    private static string Num(double v) => v.ToString("R", CultureInfo.InvariantCulture);

    public static string Manifest(CutSeries series)
    {
        var text = new StringBuilder();
        text.Append("# A synthetic section series cut from ").Append(Path.GetFileName(series.Source))
            .Append(" by `stackbuild cut` (axis ").Append(series.Options.Axis).Append(", every ").Append(series.Options.Every)
            .Append(" plane(s), ").Append(series.Options.Tilted ? $"knife tilted {Num(series.Options.TiltXDegrees)}° and {Num(series.Options.TiltYDegrees)}°, " : "")
            .Append("seed ").Append(series.Options.Seed).Append("). Lost sections are listed with no file.\n");
        text.Append("# The mirrored column is left empty on purpose: which sections lie face down is for registration to find.\n");
        text.Append("#! pixel_size_um = ").Append(Num(series.PixelSizeUm)).Append('\n');
        text.Append("#! spacing_um = ").Append(Num(series.SpacingUm)).Append('\n');
        text.Append("section,file,mirrored,exclude,damaged,note\n");
        foreach (var s in series.Sections)
            text.Append(s.Number).Append(',').Append(s.FileName ?? "").Append(",,,,").Append(s.Lost ? "lost during cutting" : "").Append('\n');
        return text.ToString();
    }

    public static string TruthJson(CutSeries series)
    {
        var o = series.Options;
        var truth = new Dictionary<string, object?>
        {
            ["format"] = TruthFormat,
            ["version"] = 1,
            ["description"] = $"Ground truth of a series cut by `stackbuild cut` from {Path.GetFileName(series.Source)}: planes along voxel axis {o.Axis}, " +
                              "each laid on a square canvas, turned, shifted, some mounted face down (mirrored left-right before the turn), some lost.",
            ["source"] = Path.GetFullPath(series.Source),
            ["options"] = new Dictionary<string, object?>
            {
                ["axis"] = o.Axis.ToString(), ["every"] = o.Every, ["seed"] = o.Seed, ["sections"] = series.Sections.Count,
                ["width"] = series.PlaneWidth, ["height"] = series.PlaneHeight, ["canvas"] = series.Canvas,
                ["pixel_size_um"] = series.PixelSizeUm, ["spacing_um"] = series.SpacingUm, ["max_shift"] = o.MaxShift,
                ["face_down"] = o.FaceDown, ["lost"] = o.Lost, ["gain_spread"] = o.GainSpread, ["noise"] = o.Noise,
                ["bright_field"] = o.BrightField, ["bits"] = o.Bits,
                ["tilt_degrees"] = new[] { o.TiltXDegrees, o.TiltYDegrees },
            },
            ["pixel_convention"] = "x right, y down, (0,0) at the centre of the top-left pixel; a truth plane is the volume plane resampled to the scan pixel size " +
                                   "(x along the first in-plane voxel axis, y along the second); plane_to_image maps truth-plane pixels to image pixels (3x3 rows)",
            ["tilt_convention"] = "with options.tilt_degrees = [tx, ty] not both 0, the knife's plane for volume_plane k passes through that plane's centre turned by " +
                                  "R = Rx(tx) Ry(ty) in millimetres (x along the first in-plane voxel axis, y along the second, z along the cut axis; " +
                                  "Rx turns y towards z, Ry turns z towards x): truth-plane offset (a, b) mm from the plane's centre lies at R (a, b, 0); " +
                                  "sampled trilinearly",
            ["plane_normal"] = o.Tilted ? new[] { Normal(o)[0], Normal(o)[1], Normal(o)[2] } : null,
            ["image_model"] = o.BrightField
                ? "value = 0.92 - 0.75 * gain * v + noise, v the volume scaled by its 0.1 % and 99.9 % quantiles to 0-1, clamped to 0-1, times 2^bits - 1"
                : "value = 0.04 + 0.75 * gain * v + noise, v the volume scaled by its 0.1 % and 99.9 % quantiles to 0-1, clamped to 0-1, times 2^bits - 1",
            ["sections"] = series.Sections.Select(s => new Dictionary<string, object?>
            {
                ["number"] = s.Number, ["file"] = s.FileName, ["volume_plane"] = s.Plane, ["lost"] = s.Lost, ["mirrored"] = s.Mirrored,
                ["gain"] = s.Gain, ["tissue_share"] = Math.Round(s.TissueShare, 5),
                ["rotation_degrees"] = Math.Round(s.PlaneToImage.RotationDegrees, 6), ["plane_to_image"] = s.PlaneToImage.ToRows(),
            }).ToList(),
        };
        return JsonSerializer.Serialize(truth, new JsonSerializerOptions { WriteIndented = true }) + "\n";
    }

    /// <summary>The cutting plane's normal (R's third column) in the stack's millimetre frame, rounded to 9 places.</summary>
    private static double[] Normal(CutOptions o)
    {
        var r = Template.TemplateVolume.TiltRotation(o.TiltXDegrees, o.TiltYDegrees);
        return [Math.Round(r[0, 2], 9), Math.Round(r[1, 2], 9), Math.Round(r[2, 2], 9)];
    }

    /// <summary>Refuses options out of range (all problems at once), before any file is read.</summary>
    public static void Check(CutOptions o)
    {
        var problems = new List<InputProblemException>();
        void Bad(bool bad, string what, string todo) { if (bad) problems.Add(new InputProblemException(null, what, todo)); }
        Bad(!"ijk".Contains(o.Axis), $"--axis {o.Axis} is not a voxel axis", "give i, j or k");
        Bad(o.Every < 1, $"--every {o.Every} is below 1", "give 1 for every plane, 2 for every other, …");
        Bad(o.PixelSizeUm is { } p && !(p > 0 && double.IsFinite(p)), $"--pixel-size {o.PixelSizeUm} is not a positive size", "give the scan pixel size in µm");
        Bad(!(o.CanvasScale >= 1 && o.CanvasScale <= 4), $"--canvas {o.CanvasScale} is out of range", "give 1 to 4 (canvas side over the plane's long side)");
        Bad(!(o.MaxShift >= 0 && o.MaxShift <= 0.4), $"--shift {o.MaxShift} is out of range", "give a share of the canvas from 0 to 0.4");
        Bad(!(o.FaceDown >= 0 && o.FaceDown <= 0.5), $"--face-down {o.FaceDown} is out of range", "give a share from 0 to 0.5");
        Bad(!(o.Lost >= 0 && o.Lost <= 0.5), $"--lost {o.Lost} is out of range", "give a share from 0 to 0.5");
        Bad(!(o.GainSpread >= 0 && o.GainSpread < 1), $"--gain-spread {o.GainSpread} is out of range", "give 0 to 0.9");
        Bad(!(o.Noise >= 0 && o.Noise <= 0.5), $"--noise {o.Noise} is out of range", "give a share of the intensity range from 0 to 0.5");
        Bad(o.Bits is not (8 or 16), $"--bits {o.Bits} is not supported", "give 8 or 16");
        Bad(!(Math.Abs(o.TiltXDegrees) <= 30 && Math.Abs(o.TiltYDegrees) <= 30), $"--tilt {o.TiltXDegrees},{o.TiltYDegrees} is out of range",
            "give each tilt from -30 to 30 degrees (a knife more oblique than that is cutting along another axis: choose --axis)");
        Bad(o.SpacingUm is { } s && !(s > 0 && double.IsFinite(s)), $"--spacing {o.SpacingUm} is not a positive spacing", "give the section spacing in µm");
        if (problems.Count == 1) throw problems[0];
        if (problems.Count > 1) throw new InputProblemsException(problems);
    }

    private static (double Low, double High) Range(float[] voxels)
    {
        var finite = voxels.Where(float.IsFinite).ToArray();
        if (finite.Length == 0) return (0, 1);
        var sample = finite.Length > 2_000_000 ? finite.Where((_, i) => i % (finite.Length / 1_000_000) == 0).ToArray() : finite;
        Array.Sort(sample);
        double low = sample[(int)(0.001 * (sample.Length - 1))], high = sample[(int)(0.999 * (sample.Length - 1))];
        if (!(high > low)) { low = sample[0]; high = sample[^1]; }
        return high > low ? (low, high) : (low, low + 1);
    }

    private static int TissueVoxels(GrayImage plane, double low, double high)
    {
        float level = (float)(low + TissueLevel * (high - low));
        int count = 0;
        foreach (var v in plane.Pixels) if (v > level) count++;
        return count;
    }

    /// <summary>Lost sections: the share of all, one next to each end (sections 2 and N − 1) when any is lost.</summary>
    private static HashSet<int> ChooseLost(int count, double share, DemoRandom rng)
    {
        var lost = new HashSet<int>();
        int n = (int)Math.Round(share * count);
        if (share > 0 && count >= 6) { lost.Add(1); lost.Add(count - 2); n = Math.Max(n, 2); }
        while (lost.Count < Math.Min(n, count / 3))
        {
            int k = 1 + rng.NextInt(count - 2);
            // never two lost in a row, never the end sections themselves
            if (!lost.Contains(k - 1) && !lost.Contains(k + 1)) lost.Add(k);
        }
        return lost;
    }

    private static HashSet<int> Choose(int count, double share, DemoRandom rng, HashSet<int> except)
    {
        var chosen = new HashSet<int>();
        int n = share > 0 ? Math.Max(1, (int)Math.Round(share * count)) : 0;
        while (chosen.Count < Math.Min(n, count - except.Count))
        {
            int k = rng.NextInt(count);
            if (!except.Contains(k)) chosen.Add(k);
        }
        return chosen;
    }
}
