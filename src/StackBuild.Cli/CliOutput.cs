using StackBuild.IO;

namespace StackBuild.Cli;

/// <summary>Where commands write, and the one place that turns input problems into one-line messages and exit codes.</summary>
public sealed class CliOutput(TextWriter stdout, TextWriter stderr)
{
    public TextWriter Out { get; } = stdout;
    public TextWriter Error { get; } = stderr;

    /// <summary>True when progress lines should be shown (a terminal on stderr, and not under a test writer).</summary>
    public bool ShowProgress => ReferenceEquals(Error, Console.Error) && !Console.IsErrorRedirected;

    // The exit codes, as README.md's table lists them.
    public const int ExitOk = 0;
    public const int ExitInputProblem = 1;
    public const int ExitCommandLine = 2;
    public const int ExitFailure = 3;

    /// <summary>Runs a command body, mapping known problems to one clear line each and a non-zero exit.</summary>
    public int Guard(Func<int> body)
    {
        try
        {
            return body();
        }
        catch (InputProblemsException many)
        {
            foreach (var p in many.Problems) Error.WriteLine($"error: {p.Message}");
            return ExitInputProblem;
        }
        catch (CommandLineProblemException commandLine)
        {
            Error.WriteLine($"error: {commandLine.Message}");
            return ExitCommandLine;
        }
        catch (InputProblemException one)
        {
            Error.WriteLine($"error: {one.Message}");
            return ExitInputProblem;
        }
        catch (AggregateException many) when (many.Flatten().InnerExceptions.All(e => e is InputProblemException))
        {
            // Problems found while sections were read in parallel: one line each, each file once.
            foreach (var message in many.Flatten().InnerExceptions.Select(e => e.Message).Distinct())
                Error.WriteLine($"error: {message}");
            return ExitInputProblem;
        }
        catch (IOException io)
        {
            Error.WriteLine($"error: {io.Message} — check the path, free disk space and permissions, then run again");
            return ExitFailure;
        }
        catch (UnauthorizedAccessException denied)
        {
            Error.WriteLine($"error: {denied.Message} — choose a location you may write to");
            return ExitFailure;
        }
        catch (Exception unexpected) when (unexpected is not OutOfMemoryException)
        {
            var inner = unexpected is AggregateException a ? a.Flatten().InnerExceptions[0] : unexpected;
            Error.WriteLine($"error: StackBuild stopped on an unexpected problem ({inner.GetType().Name}: {inner.Message}) — " +
                "nothing was written; please report it with the command you ran");
            return ExitFailure;
        }
    }

    private static readonly System.Diagnostics.Stopwatch Clock = System.Diagnostics.Stopwatch.StartNew();
    private readonly ProgressLines _progress = new(() => Clock.Elapsed);

    /// <summary>
    /// On a terminal, one line rewritten in place with the time left in its stage; when stderr goes to a file or a pipe (a
    /// log, a job script), a line when a stage starts and then its count and time left about once a minute
    /// (<see cref="ProgressLines"/>), so that a long build does not look hung.
    /// </summary>
    public void Progress(string text)
    {
        if (ShowProgress) { Error.Write($"\r{_progress.ForTerminal(text)}\u001b[K"); return; }
        if (!ReferenceEquals(Error, Console.Error)) return;
        if (_progress.ForLog(text) is { } line) Error.WriteLine(line);
    }

    public void EndProgress()
    {
        if (ShowProgress) Error.WriteLine();
        _progress.Reset();
    }
}
