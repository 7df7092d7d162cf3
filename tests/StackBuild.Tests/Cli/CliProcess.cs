using System.Diagnostics;
using System.Runtime.InteropServices;
using System.Text;

namespace StackBuild.Tests;

/// <summary>
/// The <c>stackbuild</c> command run as a child process (<c>dotnet stackbuild.dll …</c>, the copy built beside the tests),
/// for what an in-process run cannot show: a signal from outside, a kill part-way.
/// </summary>
internal sealed class CliProcess : IDisposable
{
    private readonly Process _process;
    private readonly StringBuilder _out = new(), _err = new();
    private readonly TaskCompletionSource<string> _firstLine = new(TaskCreationOptions.RunContinuationsAsynchronously);

    public int Id => _process.Id;
    public string Out { get { lock (_out) return _out.ToString(); } }
    public string Err { get { lock (_err) return _err.ToString(); } }

    /// <summary>The first line the command writes on stdout (or "" if it ends without one).</summary>
    public Task<string> FirstLine => _firstLine.Task;

    private CliProcess(string workingDirectory, string[] args)
    {
        var dll = Path.Combine(AppContext.BaseDirectory, "stackbuild.dll");
        if (!File.Exists(dll)) throw new InvalidOperationException($"{dll} is missing: the test project should copy the CLI it references");
        // The runtime leaves SIGINT ignored when the process that started it ignored it (a job started in the background
        // by a non-interactive shell, as test runners often are); a terminal's Ctrl+C never reaches an ignored signal.
        // GNU env's --default-signal gives the child the disposition it has under a terminal.
        var start = new ProcessStartInfo("/usr/bin/env")
        {
            WorkingDirectory = workingDirectory,
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        foreach (var a in new[] { "--default-signal=INT", "dotnet", dll }.Concat(args)) start.ArgumentList.Add(a);
        _process = new Process { StartInfo = start };
        _process.OutputDataReceived += (_, e) =>
        {
            if (e.Data is null) { _firstLine.TrySetResult(""); return; }
            lock (_out) _out.AppendLine(e.Data);
            _firstLine.TrySetResult(e.Data);
        };
        _process.ErrorDataReceived += (_, e) => { if (e.Data is not null) lock (_err) _err.AppendLine(e.Data); };
        _process.Start();
        _process.BeginOutputReadLine();
        _process.BeginErrorReadLine();
    }

    public static CliProcess Start(string workingDirectory, params string[] args) => new(workingDirectory, args);

    /// <summary>Sends a POSIX signal to the command (env has exec'd dotnet, so the id is the command's own).</summary>
    public void Signal(int signal)
    {
        if (!TrySignal(signal)) throw new InvalidOperationException($"kill({_process.Id}, {signal}): the process had already ended");
    }

    /// <summary>
    /// As <see cref="Signal"/>, but false when the process had already ended (ESRCH: it exited, and was reaped, between the
    /// caller's last look and the signal — a race a busy machine makes likely enough to meet).
    /// </summary>
    public bool TrySignal(int signal)
    {
        if (Kill(_process.Id, signal) == 0) return true;
        int errno = Marshal.GetLastPInvokeError();
        if (errno == Esrch) return false;
        throw new InvalidOperationException($"kill({_process.Id}, {signal}) failed: errno {errno}");
    }

    private const int Esrch = 3;

    public const int SigInt = 2, SigKill = 9;

    /// <summary>Waits up to <paramref name="limit"/> for the command to end (with its output read to the end); true if it did.</summary>
    public async Task<bool> WaitAsync(TimeSpan limit)
    {
        using var cancel = new CancellationTokenSource(limit);
        try { await _process.WaitForExitAsync(cancel.Token); return true; }
        catch (OperationCanceledException) { return false; }
    }

    public bool HasExited => _process.HasExited;
    public int ExitCode => _process.ExitCode;

    /// <summary>Processes whose parent is this command (none should outlive it).</summary>
    public int[] Children()
    {
        var children = new List<int>();
        foreach (var dir in Directory.EnumerateDirectories("/proc"))
        {
            if (!int.TryParse(Path.GetFileName(dir), out int pid)) continue;
            try
            {
                var stat = File.ReadAllText(Path.Combine(dir, "stat"));
                // pid (comm) state ppid …; comm may hold spaces, so read after the last ')'.
                var fields = stat[(stat.LastIndexOf(')') + 2)..].Split(' ');
                if (int.Parse(fields[1]) == _process.Id) children.Add(pid);
            }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException or FormatException) { }
        }
        return children.ToArray();
    }

    public void Dispose()
    {
        try { if (!_process.HasExited) _process.Kill(entireProcessTree: true); } catch (InvalidOperationException) { }
        _process.Dispose();
    }

    [DllImport("libc", EntryPoint = "kill", SetLastError = true)]
    private static extern int Kill(int pid, int signal);
}
