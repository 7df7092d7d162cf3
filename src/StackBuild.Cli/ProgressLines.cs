using System.Globalization;
using System.Text.RegularExpressions;

namespace StackBuild.Cli;

/// <summary>
/// Turns the pipeline's progress texts ("registering: 12/213 pairs") into what a person watching a long build sees. On a
/// terminal: the text with the time left in its stage, estimated from the stage's rate so far, for a line rewritten in
/// place. In a log (stderr to a file or a job script's output): a line when a stage starts, then the count and the time
/// left at most once every <see cref="LogEvery"/>, so that an hour of registration shows it is alive without flooding the
/// log. The clock is passed in, so tests can drive it.
/// </summary>
public sealed partial class ProgressLines(Func<TimeSpan> clock)
{
    /// <summary>The least time between two count lines of one stage in a log.</summary>
    public static readonly TimeSpan LogEvery = TimeSpan.FromSeconds(60);

    /// <summary>No estimate before the stage has run this long (its first items say little about its rate).</summary>
    public static readonly TimeSpan EstimateAfter = TimeSpan.FromSeconds(3);

    private string? _stage;
    private TimeSpan _stageStart, _lastLogged;
    private readonly object _gate = new();

    /// <summary>The line for a terminal: the text, and the time left when it can be estimated.</summary>
    public string ForTerminal(string text)
    {
        lock (_gate)
        {
            var now = clock();
            Enter(StageOf(text), now);
            return text + Left(text, now);
        }
    }

    /// <summary>The line to append to a log for this text, or null when nothing new is worth a line.</summary>
    public string? ForLog(string text)
    {
        lock (_gate)
        {
            var now = clock();
            string stage = StageOf(text);
            if (Enter(stage, now)) return $"{stage}…";
            if (now - _lastLogged < LogEvery || Count(text) is not (int done, int total) || done >= total) return null;
            _lastLogged = now;
            return text + Left(text, now);
        }
    }

    /// <summary>Forgets the stage (the build ended or failed).</summary>
    public void Reset()
    {
        lock (_gate) _stage = null;
    }

    /// <summary>True when <paramref name="stage"/> is a new stage (its clock starts now).</summary>
    private bool Enter(string stage, TimeSpan now)
    {
        if (stage == _stage) return false;
        _stage = stage;
        _stageStart = _lastLogged = now;
        return true;
    }

    private string Left(string text, TimeSpan now)
    {
        var elapsed = now - _stageStart;
        if (elapsed < EstimateAfter || Count(text) is not (int done, int total) || done <= 0 || done >= total) return "";
        return $" — about {Duration(elapsed * ((total - done) / (double)done))} left";
    }

    /// <summary>"40 s", "3 min", "2 h 10 min": the time left to the precision it deserves.</summary>
    public static string Duration(TimeSpan t)
    {
        if (t.TotalSeconds < 60) return $"{Math.Max(5, 5 * (int)Math.Round(t.TotalSeconds / 5)).ToString(CultureInfo.InvariantCulture)} s";
        if (t.TotalMinutes < 90) return $"{Math.Max(1, (int)Math.Round(t.TotalMinutes)).ToString(CultureInfo.InvariantCulture)} min";
        int minutes = (int)Math.Round(t.TotalMinutes);
        return $"{(minutes / 60).ToString(CultureInfo.InvariantCulture)} h {(minutes % 60).ToString(CultureInfo.InvariantCulture)} min";
    }

    private static string StageOf(string text)
    {
        int colon = text.IndexOf(':');
        return (colon > 0 ? text[..colon] : text).TrimEnd('…');
    }

    private static (int Done, int Total)? Count(string text)
    {
        var m = CountPattern().Match(text);
        return m.Success && int.TryParse(m.Groups[1].Value, NumberStyles.None, CultureInfo.InvariantCulture, out int done)
            && int.TryParse(m.Groups[2].Value, NumberStyles.None, CultureInfo.InvariantCulture, out int total) && total > 0
            ? (done, total) : null;
    }

    [GeneratedRegex(@"(\d+)/(\d+)")]
    private static partial Regex CountPattern();
}
