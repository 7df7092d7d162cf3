using System.CommandLine;
using StackBuild.Cli.Commands;
using StackBuild.Numerics;

namespace StackBuild.Cli;

public static class Program
{
    public static int Main(string[] args) => Run(args, Console.Out, Console.Error);

    /// <summary>Runs the command line with the given writers (tests call this directly).</summary>
    public static int Run(string[] args, TextWriter stdout, TextWriter stderr) => Run(args, stdout, stderr, CliHooks.None);

    /// <summary>As <see cref="Run(string[], TextWriter, TextWriter)"/>, with <paramref name="hooks"/> called at fixed points of a command (tests).</summary>
    internal static int Run(string[] args, TextWriter stdout, TextWriter stderr, CliHooks hooks)
    {
        var root = new RootCommand(
            "StackBuild rebuilds a series of serial tissue sections into one aligned 3D volume (NIfTI-1).\n" +
            "Research software; not for clinical use.\n\n" +
            "Example:\n  stackbuild demo my-demo\n  stackbuild build my-demo -o my-demo-volume.nii.gz\n  stackbuild info my-demo-volume.nii.gz");
        var console = new CliOutput(stdout, stderr);
        foreach (var command in Commands(console, hooks)) root.Subcommands.Add(command);
        foreach (var version in root.Options.OfType<VersionOption>()) version.Action = new VersionAction(stdout);
        var config = new InvocationConfiguration { Output = stdout, Error = stderr };
        var parsed = root.Parse(args.Length == 0 ? ["--help"] : args);
        if (parsed.Errors.Count > 0)
        {
            // One line per problem and a pointer to the help, instead of the whole help text.
            var commandName = parsed.CommandResult.Command == root ? "stackbuild" : $"stackbuild {parsed.CommandResult.Command.Name}";
            foreach (var message in ParseErrors.Lines(parsed))
                stderr.WriteLine($"error: {message} — see '{commandName} --help'");
            return CliOutput.ExitCommandLine;
        }
        // FFTW's plans from earlier runs (the core touches no such file itself); new ones are kept for the next run.
        FftPlanCache.Load();
        try { return parsed.Invoke(config); }
        finally { FftPlanCache.Save(); }
    }

    /// <summary>--version: the version and the FFT in use (FFTW when Debian's libfftw3-single3 is installed).</summary>
    private sealed class VersionAction(TextWriter stdout) : System.CommandLine.Invocation.SynchronousCommandLineAction
    {
        public override int Invoke(ParseResult parseResult)
        {
            stdout.WriteLine($"stackbuild {StackBuild.Pipeline.BuildPipeline.Version}");
            stdout.WriteLine($"FFT: {StackBuild.Numerics.Fft2D.ProviderName}");
            stdout.WriteLine("Research software; not for clinical use.");
            return 0;
        }
    }

    private static IEnumerable<Command> Commands(CliOutput console, CliHooks hooks)
    {
        yield return InfoCommand.Create(console);
        yield return DemoCommand.Create(console);
        yield return CutCommand.Create(console);
        yield return BuildCommand.Create(console, hooks);
        yield return ApplyCommand.Create(console);
        yield return MergeCommand.Create(console);
        yield return PointsCommand.Create(console);
        yield return EvaluateCommand.Create(console);
        yield return ResliceCommand.Create(console);
        yield return ResliceCommand.CreateBenchmark(console);
        yield return ViewCommand.Create(console);
    }
}

/// <summary>
/// Points inside a command where a test can step in, to make happen deterministically what would otherwise be a race
/// (a file removed while a build runs). The command line itself always runs with <see cref="None"/>.
/// </summary>
/// <param name="AfterListing">Called by <c>build</c> once the series is listed (headers read), before any pixels are.</param>
internal sealed record CliHooks(Action<StackBuild.Series.SectionSeries>? AfterListing = null)
{
    public static readonly CliHooks None = new();
}
