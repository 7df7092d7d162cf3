using System.Text.Json;
using System.Text.Json.Serialization;
using StackBuild.Solve;

namespace StackBuild.Pipeline;

/// <summary>The sidecar's words for a section's status and route: one table each, used to write and to read.</summary>
public static class SidecarWords
{
    private static readonly Dictionary<SectionOutcome, string> StatusWords = new()
    {
        [SectionOutcome.Placed] = "placed",
        [SectionOutcome.Aligned] = "aligned",
        [SectionOutcome.Gap] = "gap",
        [SectionOutcome.Excluded] = "excluded",
        [SectionOutcome.Failed] = "failed",
    };

    private static readonly Dictionary<LinkRoute, string> RouteWords = new()
    {
        [LinkRoute.Reference] = "reference",
        [LinkRoute.Neighbour] = "neighbour",
        [LinkRoute.SecondNeighbour] = "second-neighbour",
        [LinkRoute.Distant] = "distant",
        [LinkRoute.Failed] = "failed",
        [LinkRoute.Template] = "template",
        [LinkRoute.PartReference] = "part-reference",
    };

    /// <summary>The sidecar's word for a status: placed, aligned, gap, excluded or failed.</summary>
    public static string Word(this SectionOutcome status) => StatusWords[status];

    /// <summary>The sidecar's word for a route: reference, neighbour, second-neighbour, distant, failed, template or part-reference.</summary>
    public static string Word(this LinkRoute route) => RouteWords[route];

    internal static T Parse<T>(Dictionary<T, string> words, string? word, string what) where T : struct, Enum
    {
        foreach (var (value, w) in words)
            if (w == word) return value;
        throw new JsonException($"unknown {what} \"{word}\" (expected {string.Join(", ", words.Values)})");
    }

    /// <summary>Writes and reads <see cref="SectionOutcome"/> as its sidecar word.</summary>
    public sealed class StatusConverter : JsonConverter<SectionOutcome>
    {
        public override SectionOutcome Read(ref Utf8JsonReader reader, Type typeToConvert, JsonSerializerOptions options) =>
            Parse(StatusWords, reader.GetString(), "section status");
        public override void Write(Utf8JsonWriter writer, SectionOutcome value, JsonSerializerOptions options) => writer.WriteStringValue(value.Word());
    }

    /// <summary>Writes and reads <see cref="LinkRoute"/> as its sidecar word.</summary>
    public sealed class RouteConverter : JsonConverter<LinkRoute>
    {
        public override LinkRoute Read(ref Utf8JsonReader reader, Type typeToConvert, JsonSerializerOptions options) =>
            Parse(RouteWords, reader.GetString(), "route");
        public override void Write(Utf8JsonWriter writer, LinkRoute value, JsonSerializerOptions options) => writer.WriteStringValue(value.Word());
    }
}
