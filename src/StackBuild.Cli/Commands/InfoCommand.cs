using System.CommandLine;

namespace StackBuild.Cli.Commands;

public static class InfoCommand
{
    public static Command Create(CliOutput console)
    {
        var command = new Command("info", "TODO");
        command.SetAction(_ => console.Guard(() => { console.Error.WriteLine("not yet built"); return CliOutput.ExitFailure; }));
        return command;
    }
}
