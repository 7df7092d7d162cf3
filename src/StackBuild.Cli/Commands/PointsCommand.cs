using System.CommandLine;
using StackBuild.IO;
using StackBuild.Pipeline;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild points BUILD.json --in marks.csv -o out.csv</c>: marks on the scans to voxel and world coordinates, and back.</summary>
public static class PointsCommand
{
    public static Command Create(CliOutput console)
    {
        var sidecar = new Argument<string>("BUILD.json") { Description = "The sidecar written beside a volume by 'stackbuild build'" };
        var input = new Option<string>("--in") { Description = "CSV with a header: section, x, y (scan pixels: x right, y down, (0, 0) the centre of the top-left pixel); other columns are carried through", Required = true };
        var output = new Option<string>("--output", "-o") { Description = "CSV to write: the input's rows with i, j, k (voxels) and x_mm, y_mm, z_mm (world, RAS+) appended", Required = true };
        var inverse = new Option<bool>("--inverse") { Description = "Map world positions (columns x_mm, y_mm, z_mm) back to the nearest placed section: appends nearest_section, scan_x, scan_y, off_plane_mm" };
        input.HelpName = "CSV";
        output.HelpName = "CSV";
        var command = new Command("points",
            "Carry positions marked on the scans (cells, a track, an outline) into the volume through a build's stored placements, " +
            "or world positions back to the scans.\n\n" +
            "Examples:\n  stackbuild points volume.json --in marks.csv -o marks-in-volume.csv\n" +
            "  stackbuild points volume.json --in targets.csv -o targets-on-scans.csv --inverse")
        {
            sidecar, input, output, inverse,
        };
        command.SetAction(parse => console.Guard(() =>
        {
            string sidecarPath = parse.GetValue(sidecar)!, inPath = parse.GetValue(input)!, outPath = parse.GetValue(output)!;
            if (Path.GetFullPath(outPath) == Path.GetFullPath(inPath) || Path.GetFullPath(outPath) == Path.GetFullPath(sidecarPath))
                throw new InputProblemException(outPath, "the output would replace an input", "choose another output name");
            if (Directory.Exists(outPath))
                throw new InputProblemException(outPath, "the output is a folder", "give a file name such as marks-in-volume.csv");
            var folder = Path.GetDirectoryName(Path.GetFullPath(outPath))!;
            if (!Directory.Exists(folder))
                throw new InputProblemException(outPath, "the folder for this output does not exist", "create the folder first or choose another output path");
            var mapping = new PointMapping(SidecarFile.ReadWithVolume(sidecarPath, console.Error), sidecarPath);
            string text;
            try { text = File.ReadAllText(inPath); }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException)
            {
                throw new InputProblemException(inPath, File.Exists(inPath) ? "the file cannot be read" : "no such file", "check the path and permissions");
            }
            var mapped = mapping.MapCsv(inPath, text, parse.GetValue(inverse));
            AtomicFile.WriteAllText(outPath, mapped);
            int rows = mapped.Count(c => c == '\n') - 1;
            console.Out.WriteLine($"{rows} {(rows == 1 ? "row" : "rows")} mapped → {outPath}");
            return CliOutput.ExitOk;
        }));
        return command;
    }
}
