using System.Buffers.Binary;
using System.Text;
using System.Text.Json.Nodes;

namespace StackBuild.Tests.Fuzz;

/// <summary>A numeric field of a binary header: where it is, how wide, and how it is stored.</summary>
internal sealed record HeaderField(string Name, int Offset, FieldKind Kind);

internal enum FieldKind { Int16, Int32, Float32, Byte }

/// <summary>
/// Seeded mutations of a valid file: bit flips, bytes set at random, truncation, inserted and deleted runs, a run
/// copied elsewhere, and header fields set to extremes. One <see cref="Random"/> per case, so a case is replayed from its seed.
/// </summary>
internal static class Mutations
{
    private static readonly short[] ExtremeShorts = [0, 1, -1, 2, 3, 4, 7, 8, 16, short.MaxValue, short.MinValue, 255, 256, 1024];
    private static readonly int[] ExtremeInts = [0, 1, -1, 348, 352, 540, int.MaxValue, int.MinValue, 1 << 24, 65536, 0x7FFF_FFF0];
    private static readonly float[] ExtremeFloats =
        [0f, -0f, 1f, -1f, float.NaN, float.PositiveInfinity, float.NegativeInfinity, float.MaxValue, -float.MaxValue, float.Epsilon, 1e-30f, 1e30f, 352f, 1e10f, 4.5e9f];
    private static readonly uint[] ExtremeUInts = [0, 1, 0xFFFF_FFFF, 0x7FFF_FFFF, 0x8000_0000, 65535, 65536, 46341, 100_000, 1 << 20];

    /// <summary>One to four byte-level mutations of <paramref name="input"/>, with header fields set to extremes when given.</summary>
    public static byte[] Bytes(byte[] input, Random random, IReadOnlyList<HeaderField>? fields = null)
    {
        var data = new List<byte>(input);
        int count = 1 + random.Next(4);
        for (int m = 0; m < count; m++)
        {
            int choice = random.Next(fields is { Count: > 0 } ? 9 : 7);
            if (data.Count == 0) choice = 3;
            switch (choice)
            {
                case 0: // flip one bit
                {
                    int at = random.Next(data.Count);
                    data[at] ^= (byte)(1 << random.Next(8));
                    break;
                }
                case 1: // set a few bytes at random
                    for (int k = random.Next(1, 9); k > 0; k--) data[random.Next(data.Count)] = (byte)random.Next(256);
                    break;
                case 2: // truncate
                {
                    int keep = random.Next(data.Count);
                    data.RemoveRange(keep, data.Count - keep);
                    break;
                }
                case 3: // insert random bytes
                {
                    var run = new byte[random.Next(1, 64)];
                    random.NextBytes(run);
                    data.InsertRange(random.Next(data.Count + 1), run);
                    break;
                }
                case 4: // delete a run
                {
                    int at = random.Next(data.Count);
                    data.RemoveRange(at, Math.Min(data.Count - at, random.Next(1, 64)));
                    break;
                }
                case 5: // copy a run over another place
                {
                    int from = random.Next(data.Count), to = random.Next(data.Count);
                    int length = Math.Min(random.Next(1, 128), Math.Min(data.Count - from, data.Count - to));
                    var run = data.GetRange(from, length);
                    for (int k = 0; k < length; k++) data[to + k] = run[k];
                    break;
                }
                case 6: // an extreme 32-bit value anywhere, in either byte order
                {
                    if (data.Count < 4) break;
                    int at = random.Next(data.Count - 3);
                    var value = ExtremeUInts[random.Next(ExtremeUInts.Length)];
                    Span<byte> bytes = stackalloc byte[4];
                    if (random.Next(2) == 0) BinaryPrimitives.WriteUInt32LittleEndian(bytes, value);
                    else BinaryPrimitives.WriteUInt32BigEndian(bytes, value);
                    for (int k = 0; k < 4; k++) data[at + k] = bytes[k];
                    break;
                }
                default: // a header field set to an extreme
                {
                    var field = fields![random.Next(fields.Count)];
                    var array = data.ToArray();
                    SetField(array, field, random, bigEndian: random.Next(4) == 0);
                    data = [.. array];
                    break;
                }
            }
        }
        return [.. data];
    }

    /// <summary>Sets <paramref name="field"/> to one of its kind's extremes (nothing when the data is too short to hold it).</summary>
    public static void SetField(byte[] data, HeaderField field, Random random, bool bigEndian)
    {
        var span = data.AsSpan();
        switch (field.Kind)
        {
            case FieldKind.Byte when field.Offset < data.Length:
                data[field.Offset] = (byte)ExtremeShorts[random.Next(ExtremeShorts.Length)];
                break;
            case FieldKind.Int16 when field.Offset + 2 <= data.Length:
            {
                var v = ExtremeShorts[random.Next(ExtremeShorts.Length)];
                if (bigEndian) BinaryPrimitives.WriteInt16BigEndian(span[field.Offset..], v);
                else BinaryPrimitives.WriteInt16LittleEndian(span[field.Offset..], v);
                break;
            }
            case FieldKind.Int32 when field.Offset + 4 <= data.Length:
            {
                var v = ExtremeInts[random.Next(ExtremeInts.Length)];
                if (bigEndian) BinaryPrimitives.WriteInt32BigEndian(span[field.Offset..], v);
                else BinaryPrimitives.WriteInt32LittleEndian(span[field.Offset..], v);
                break;
            }
            case FieldKind.Float32 when field.Offset + 4 <= data.Length:
            {
                var v = ExtremeFloats[random.Next(ExtremeFloats.Length)];
                if (bigEndian) BinaryPrimitives.WriteSingleBigEndian(span[field.Offset..], v);
                else BinaryPrimitives.WriteSingleLittleEndian(span[field.Offset..], v);
                break;
            }
        }
    }

    private static readonly string[] ExtremeTokens =
    [
        "", "0", "-0", "-1", "1e309", "-1e309", "1e-320", "NaN", "Infinity", "-Infinity", "2147483647", "2147483648", "-2147483649",
        "99999999999999999999999", "0x10", "1,5", "1.5.5", "\"", "\"\"", "\"a\"b", "#!", "#", "yes", "maybe", "s_001.png", "s_002.png",
        "../s_001.png", "/", ".", "nul\0byte", "a\tb", "\u00e9t\u00e9", "\uFEFF1", "\r", " 7 ", "1e3", "+5",
    ];

    /// <summary>A CSV-like text mutated by lines and fields (fields replaced by extreme tokens, lines duplicated, dropped, swapped, settings added).</summary>
    public static string Lines(string text, Random random)
    {
        var lines = text.Split('\n').ToList();
        int count = 1 + random.Next(3);
        for (int m = 0; m < count && lines.Count > 0; m++)
        {
            int at = random.Next(lines.Count);
            switch (random.Next(7))
            {
                case 0: // a field replaced by an extreme token
                {
                    var fields = lines[at].Split(',');
                    fields[random.Next(fields.Length)] = Token(random);
                    lines[at] = string.Join(',', fields);
                    break;
                }
                case 1: lines.Insert(at, lines[random.Next(lines.Count)]); break;
                case 2: lines.RemoveAt(at); break;
                case 3:
                {
                    int other = random.Next(lines.Count);
                    (lines[at], lines[other]) = (lines[other], lines[at]);
                    break;
                }
                case 4: lines.Insert(at, $"#! {(random.Next(2) == 0 ? "spacing_um" : "pixel_size_um")} = {Token(random)}"); break;
                case 5: lines[at] += "," + Token(random); break;
                default: lines[at] = new string(lines[at].Where((_, i) => random.Next(8) != 0).ToArray()); break;
            }
        }
        return string.Join(random.Next(5) == 0 ? "\r\n" : "\n", lines);
    }

    private static string Token(Random random) =>
        random.Next(20) == 0 ? new string('9', random.Next(300, 5000)) : ExtremeTokens[random.Next(ExtremeTokens.Length)];

    /// <summary>
    /// JSON mutated by structure: a value somewhere in the tree replaced by another kind or an extreme number, a property
    /// removed, or an array emptied or given a null. Text that does not parse is returned as it is.
    /// </summary>
    public static string Json(string text, Random random)
    {
        JsonNode? root;
        try { root = JsonNode.Parse(text); }
        catch (System.Text.Json.JsonException) { return text; }
        if (root is null) return text;
        var nodes = new List<JsonNode>();
        Collect(root, nodes);
        int count = 1 + random.Next(3);
        for (int m = 0; m < count; m++)
        {
            var node = nodes[random.Next(nodes.Count)];
            var parent = node.Parent;
            if (parent is null) continue;
            var replacement = Replacement(random);
            if (parent is JsonObject obj)
            {
                var name = node.GetPropertyName();
                if (random.Next(5) == 0) obj.Remove(name);
                else obj[name] = replacement;
            }
            else if (parent is JsonArray array)
            {
                int index = node.GetElementIndex();
                if (random.Next(5) == 0) array.RemoveAt(index);
                else array[index] = replacement;
            }
            nodes.Clear();
            Collect(root, nodes);
            if (nodes.Count == 0) break;
        }
        return root.ToJsonString();
    }

    private static void Collect(JsonNode node, List<JsonNode> nodes)
    {
        nodes.Add(node);
        if (node is JsonObject obj)
            foreach (var (_, child) in obj) { if (child is not null) Collect(child, nodes); }
        else if (node is JsonArray array)
            foreach (var child in array) { if (child is not null) Collect(child, nodes); }
    }

    private static JsonNode? Replacement(Random random) => random.Next(16) switch
    {
        0 => null,
        1 => JsonValue.Create(0),
        2 => JsonValue.Create(-1),
        3 => JsonValue.Create(1e308),
        4 => JsonValue.Create(-1e308),
        5 => JsonValue.Create(2147483648L),
        6 => JsonValue.Create(-2147483649L),
        7 => JsonValue.Create(0.5),
        8 => JsonValue.Create(""),
        9 => JsonValue.Create("x"),
        10 => new JsonArray(),
        11 => new JsonObject(),
        12 => new JsonArray(null, null),
        13 => new JsonArray(new JsonArray(1, 2, 3), null, new JsonArray()),
        14 => JsonValue.Create(true),
        _ => new JsonArray(JsonValue.Create(int.MaxValue), JsonValue.Create(int.MaxValue), JsonValue.Create(int.MaxValue)),
    };

    public static byte[] Utf8(string text) => Encoding.UTF8.GetBytes(text);
}
