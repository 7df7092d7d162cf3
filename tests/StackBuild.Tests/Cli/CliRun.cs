namespace StackBuild.Tests;

/// <summary>Runs the command line in-process with captured output (what a user would see on stdout and stderr).</summary>
internal static class CliRun
{
    public static (int Code, string Out, string Err) Run(params string[] args) => Run(Cli.CliHooks.None, args);

    /// <summary>As <see cref="Run(string[])"/>, with <paramref name="hooks"/> called at their points of the command.</summary>
    public static (int Code, string Out, string Err) Run(Cli.CliHooks hooks, params string[] args)
    {
        var o = new StringWriter();
        var e = new StringWriter();
        int code = Cli.Program.Run(args, o, e, hooks);
        return (code, o.ToString(), e.ToString());
    }
}
