using System.CommandLine;
using StackBuild.Cli.Commands;

namespace StackBuild.Cli;

public static class Program
{
    public static int Main(string[] args) => Run(args, Console.Out, Console.Error);

    /// <summary>Runs the command line with the given writers (tests call this directly).</summary>
    public static int Run(string[] args, TextWriter stdout, TextWriter stderr)
    {
        var root = new RootCommand(
            "StackBuild rebuilds a series of serial tissue sections into one aligned 3D volume (NIfTI-1).\n" +
            "Research software; not for clinical use.\n\n" +
            "Example:\n  stackbuild demo my-demo\n  stackbuild build my-demo -o my-demo-volume.nii.gz\n  stackbuild info my-demo-volume.nii.gz");
        var console = new CliOutput(stdout, stderr);
        foreach (var command in Commands(console)) root.Subcommands.Add(command);
        var config = new InvocationConfiguration { Output = stdout, Error = stderr };
        return root.Parse(args).Invoke(config);
    }

    private static IEnumerable<Command> Commands(CliOutput console)
    {
        yield return InfoCommand.Create(console);
        yield return DemoCommand.Create(console);
        yield return BuildCommand.Create(console);
        yield return ResliceCommand.Create(console);
        yield return ViewCommand.Create(console);
    }
}
