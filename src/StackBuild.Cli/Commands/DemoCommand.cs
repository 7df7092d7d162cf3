using System.CommandLine;

namespace StackBuild.Cli.Commands;

public static class DemoCommand
{
    public static Command Create(CliOutput console)
    {
        var command = new Command("demo", "TODO");
        command.SetAction(_ => console.Guard(() => { console.Error.WriteLine("not yet built"); return CliOutput.ExitFailure; }));
        return command;
    }
}
