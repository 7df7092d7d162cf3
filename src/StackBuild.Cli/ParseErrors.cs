using System.CommandLine;
using System.CommandLine.Parsing;
using System.Globalization;

namespace StackBuild.Cli;

/// <summary>
/// The parser's own messages in the words of this program: a value of the wrong kind names the option, the text
/// given and the kind expected (never a .NET type name); a missing argument is named.
/// </summary>
internal static class ParseErrors
{
    /// <summary>
    /// One line per problem: the words the parser did not recognise go on one line together (a mistyped option and its
    /// value are one mistake, not two).
    /// </summary>
    public static IEnumerable<string> Lines(ParseResult parsed)
    {
        var unmatched = parsed.UnmatchedTokens;
        bool said = false;
        foreach (var error in parsed.Errors)
        {
            if (unmatched.Count > 0 && error.Message.StartsWith("Unrecognized command or argument", StringComparison.Ordinal))
            {
                if (said) continue;
                said = true;
                yield return unmatched.Count == 1
                    ? $"'{Shorten(unmatched[0])}' is not an option or argument of this command"
                    : $"{string.Join(" ", unmatched.Select(t => $"'{Shorten(t)}'"))} are not options or arguments of this command";
                continue;
            }
            yield return Readable(error);
        }
    }

    public static string Readable(ParseError error)
    {
        var (name, tokens, type) = error.SymbolResult switch
        {
            ArgumentResult { Parent: OptionResult owner } a => (owner.Option.Name, a.Tokens, owner.Option.ValueType),
            OptionResult o => (o.Option.Name, o.Tokens, o.Option.ValueType),
            ArgumentResult a => (a.Argument.Name.ToUpperInvariant(), a.Tokens, a.Argument.ValueType),
            _ => ("", (IReadOnlyList<Token>)[], typeof(string)),
        };
        var kind = Kind(Nullable.GetUnderlyingType(type) ?? type);
        if (kind is not null)
            foreach (var token in tokens)
                if (!Fits(token.Value, Nullable.GetUnderlyingType(type) ?? type))
                    return $"{name} '{Shorten(token.Value)}' is not {kind}";
        if (error.Message.StartsWith("Required argument missing", StringComparison.Ordinal))
        {
            if (error.SymbolResult is ArgumentResult { Parent: not OptionResult } argument)
                return $"the {argument.Argument.Name.ToUpperInvariant()} argument is missing";
            if (error.SymbolResult is OptionResult option)
                return $"{option.Option.Name} needs a value";
        }
        return error.Message.TrimEnd('.');
    }

    private static string? Kind(Type type) =>
        type == typeof(double) || type == typeof(float) ? "a number (digits, a point for decimals)"
        : type == typeof(int) || type == typeof(long) ? "a whole number"
        : null;

    private static bool Fits(string text, Type type) =>
        type == typeof(double) || type == typeof(float)
            ? double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out _)
            : long.TryParse(text, NumberStyles.Integer, CultureInfo.InvariantCulture, out _);

    private static string Shorten(string text) => text.Length <= 40 ? text : text[..40] + "…";
}
