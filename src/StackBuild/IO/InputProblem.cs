namespace StackBuild.IO;

/// <summary>
/// A problem with the user's input that the user can fix: which file, what is wrong, and what to do.
/// The CLI prints <see cref="Exception.Message"/> as one line and exits non-zero.
/// </summary>
public class InputProblemException : Exception
{
    public string? File { get; }
    public string Problem { get; }
    public string Remedy { get; }

    public InputProblemException(string? file, string problem, string remedy, Exception? inner = null)
        : base(Format(file, problem, remedy), inner)
    {
        File = file;
        Problem = problem;
        Remedy = remedy;
    }

    public static string Format(string? file, string problem, string remedy)
    {
        var head = string.IsNullOrEmpty(file) ? problem : $"{file}: {problem}";
        return Printable(string.IsNullOrEmpty(remedy) ? head : $"{head} — {remedy}");
    }

    /// <summary>
    /// The message as one printable line: control characters quoted from a damaged file (a carriage return inside a
    /// manifest field, found by fuzzing) are written as escapes such as \r and \u0001.
    /// </summary>
    private static string Printable(string text)
    {
        if (!text.Any(char.IsControl)) return text;
        var line = new System.Text.StringBuilder(text.Length + 8);
        foreach (char c in text)
            line.Append(c switch
            {
                '\r' => "\\r",
                '\n' => "\\n",
                '\t' => "\\t",
                _ when char.IsControl(c) => $"\\u{(int)c:x4}",
                _ => c.ToString(),
            });
        return line.ToString();
    }
}

/// <summary>Several input problems found in one pass, one line each.</summary>
public sealed class InputProblemsException : Exception
{
    public IReadOnlyList<InputProblemException> Problems { get; }

    public InputProblemsException(IReadOnlyList<InputProblemException> problems)
        : base(string.Join(Environment.NewLine, problems.Select(p => p.Message))) => Problems = problems;
}

/// <summary>
/// A command-line value that cannot be read as what the option takes (text where a number goes), found by a command
/// that reads its option text itself. The CLI treats it like the parser's own errors (exit code 2, README).
/// </summary>
public sealed class CommandLineProblemException(string problem, string remedy) : InputProblemException(null, problem, remedy);
