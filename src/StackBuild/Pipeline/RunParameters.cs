using System.Globalization;
using System.Text.Json;
using System.Text.Json.Serialization;
using StackBuild.Imaging;
using StackBuild.Render;

namespace StackBuild.Pipeline;

/// <summary>Planes resampled along the stack (--voxel-size): how, and from which spacing to which, in µm.</summary>
public sealed record PlaneResampling(GapFill Method, double FromUm, double ToUm);

/// <summary>
/// The global solve's route-closure test (<see cref="Solve.SmoothingSolver"/>): the slow share of the closures (NaN when
/// there were too few sections to tell), the limit it was compared with, and the weight the second-neighbour pairs got.
/// </summary>
public sealed record RouteClosure(double SlowShare, double Limit, double SecondNeighbourWeight);

/// <summary>
/// The parameters a build ran with, as numbers and choices. The sidecar's <c>parameters</c> object holds them as
/// text for people (<see cref="Entries"/>); code reads these properties, never that text.
/// </summary>
[JsonConverter(typeof(RunParametersConverter))]
public sealed record RunParameters
{
    public double OutputPixelSizeUm { get; init; }
    /// <summary>The pixel size at which sections were registered, µm; 0 when a sidecar did not say.</summary>
    public double RegistrationPixelSizeUm { get; init; }
    public Interpolation Interpolation { get; init; }
    public GrayChannel Channel { get; init; }
    /// <summary>True when the sections were aligned (false: placed centred, as scanned).</summary>
    public bool Aligned { get; init; }
    /// <summary>The long side, in pixels, asked for registration (--work-size).</summary>
    public int WorkSizePx { get; init; }
    public double MinConfidence { get; init; } = 0.2;
    /// <summary>The FFT in use (FFTW or the managed fallback).</summary>
    public string Fft { get; init; } = "";
    /// <summary>The global solve's smoothness strength; null when the plain chain was kept.</summary>
    public double? SmoothingStrength { get; init; }
    public GapFill Fill { get; init; }
    /// <summary>How the planes were resampled along the stack; null when they were not.</summary>
    public PlaneResampling? PlaneResampling { get; init; }
    /// <summary>True when a template guided the build.</summary>
    public bool Template { get; init; }
    /// <summary>The global solve's route-closure test; null when the solve did not run.</summary>
    public RouteClosure? RouteClosure { get; init; }

    private const string AlignedText = "neighbour chain: phase correlation, any angle, mirror tested";
    private const string UnalignedText = "none (sections placed centred, unaligned)";
    private const string TemplateText = "sections matched to template slices by normalised mutual information; the template sets the course over 11 sections, the chain the detail";
    private const string TooFewText = "too few sections to tell";

    /// <summary>The parameters as the sidecar and the report show them: key and text, in order.</summary>
    public IReadOnlyList<(string Key, string Text)> Entries()
    {
        var entries = new List<(string, string)>
        {
            ("output_pixel_size_um", Num(OutputPixelSizeUm)),
            ("registration_pixel_size_um", Num(RegistrationPixelSizeUm)),
            ("interpolation", Word(Interpolation)),
            ("channel", Word(Channel)),
            ("alignment", Aligned ? AlignedText : UnalignedText),
            ("work_size_px", WorkSizePx.ToString(CultureInfo.InvariantCulture)),
            ("min_confidence", Num(MinConfidence)),
            ("fft", Fft),
            ("smoothing", SmoothingStrength is double strength ? Num(strength) : "off"),
            ("fill", Word(Fill)),
            ("z_resampling", PlaneResampling is { } z ? $"{Word(z.Method)}, {Num(z.FromUm)} µm → {Num(z.ToUm)} µm" : "none"),
            ("template", Template ? TemplateText : "none"),
        };
        if (RouteClosure is { } c)
        {
            entries.Add(("route_closure_slow_share", double.IsNaN(c.SlowShare) ? TooFewText
                : $"{Num(Math.Round(c.SlowShare, 3))}, limit {Num(Math.Round(c.Limit, 3))}"));
            entries.Add(("second_neighbour_weight", Num(c.SecondNeighbourWeight)));
        }
        return entries;
    }

    /// <summary>
    /// Reads the sidecar's text back (a sidecar written by any version: a key that is missing or not understood keeps its
    /// default). The closure share and limit come back rounded to 3 decimals, as written.
    /// </summary>
    public static RunParameters FromEntries(IReadOnlyDictionary<string, string> text)
    {
        string? Get(string key) => text.TryGetValue(key, out var v) ? v : null;
        double? Number(string? v) => double.TryParse(v, NumberStyles.Float, CultureInfo.InvariantCulture, out var d) ? d : null;
        T Choice<T>(string? v, T fallback) where T : struct, Enum => Enum.TryParse<T>(v, ignoreCase: true, out var e) ? e : fallback;
        var p = new RunParameters
        {
            OutputPixelSizeUm = Number(Get("output_pixel_size_um")) ?? 0,
            RegistrationPixelSizeUm = Number(Get("registration_pixel_size_um")) ?? 0,
            Interpolation = Choice(Get("interpolation"), Interpolation.Bilinear),
            Channel = Choice(Get("channel"), GrayChannel.Luminance),
            Aligned = Get("alignment") is string a && a != UnalignedText,
            WorkSizePx = (int)(Number(Get("work_size_px")) ?? 0),
            MinConfidence = Number(Get("min_confidence")) ?? 0.2,
            Fft = Get("fft") ?? "",
            SmoothingStrength = Number(Get("smoothing")),
            Fill = Choice(Get("fill"), GapFill.None),
            Template = Get("template") is string t && t != "none",
        };
        if (Get("z_resampling") is string z && z.Split(", ", 2) is [var method, var spacings] && spacings.Split(" µm → ") is [var from, var to]
            && Number(from) is double fromUm && Number(to.Replace(" µm", "", StringComparison.Ordinal)) is double toUm)
            p = p with { PlaneResampling = new PlaneResampling(Choice(method, GapFill.Linear), fromUm, toUm) };
        if (Get("route_closure_slow_share") is string share && Number(Get("second_neighbour_weight")) is double weight)
        {
            var parts = share.Split(", limit ");
            p = p with
            {
                RouteClosure = parts.Length == 2 && Number(parts[0]) is double s && Number(parts[1]) is double limit
                    ? new RouteClosure(s, limit, weight)
                    : new RouteClosure(double.NaN, double.PositiveInfinity, weight),
            };
        }
        return p;
    }

    private static string Num(double v) => v.ToString("R", CultureInfo.InvariantCulture);
    private static string Word<T>(T value) where T : struct, Enum => value.ToString().ToLowerInvariant();
}

/// <summary>Writes <see cref="RunParameters"/> as the sidecar's object of texts, and reads it back.</summary>
public sealed class RunParametersConverter : JsonConverter<RunParameters>
{
    public override RunParameters Read(ref Utf8JsonReader reader, Type typeToConvert, JsonSerializerOptions options) =>
        RunParameters.FromEntries(JsonSerializer.Deserialize<Dictionary<string, string>>(ref reader, options) ?? []);

    public override void Write(Utf8JsonWriter writer, RunParameters value, JsonSerializerOptions options)
    {
        writer.WriteStartObject();
        foreach (var (key, text) in value.Entries()) writer.WriteString(key, text);
        writer.WriteEndObject();
    }
}
