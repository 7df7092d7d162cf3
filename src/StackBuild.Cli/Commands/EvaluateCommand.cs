using System.CommandLine;
using System.Text.Json;
using StackBuild.Evaluate;
using StackBuild.IO;
using StackBuild.Pipeline;

namespace StackBuild.Cli.Commands;

public static class EvaluateCommand
{
    public static Command Create(CliOutput console)
    {
        var sidecar = new Argument<string>("sidecar") { Description = "The .json sidecar written by 'stackbuild build'" };
        var truth = new Option<string>("--truth") { Description = "Ground truth of the series (the truth.json of 'stackbuild demo', or your own in that format)", Required = true };
        var json = new Option<bool>("--json") { Description = "Print the full result as JSON" };
        var command = new Command("evaluate", "Measure a build against ground truth: error per section after one global fit, pairwise error, mirror decisions, drift.\n\n" +
            "Example:\n  stackbuild evaluate demo-volume.json --truth demo-series/truth.json")
        { sidecar, truth, json };
        command.SetAction(parse => console.Guard(() =>
        {
            var path = parse.GetValue(sidecar)!;
            var record = SidecarFile.ReadWithVolume(path, console.Error);
            var result = TruthEvaluation.Evaluate(record, SeriesTruth.Read(parse.GetValue(truth)!));
            if (parse.GetValue(json))
            {
                console.Out.WriteLine(JsonSerializer.Serialize(result, new JsonSerializerOptions { WriteIndented = true, PropertyNamingPolicy = JsonNamingPolicy.SnakeCaseLower, NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals }));
                return CliOutput.ExitOk;
            }
            var o = console.Out;
            o.WriteLine($"Sections evaluated  {result.Evaluated}" + (result.Missing > 0 ? $" ({result.Missing} placed sections have no truth entry)" : ""));
            o.WriteLine($"                    median     95th pct   max");
            o.WriteLine($"Placement error px  {result.ErrorPx.Median,-10:0.###} {result.ErrorPx.P95,-10:0.###} {result.ErrorPx.Max:0.###}   (after one global fit; 1 px = {result.OutputPixelUm:0.###} µm)");
            o.WriteLine($"Placement error µm  {result.ErrorUm.Median,-10:0.#} {result.ErrorUm.P95,-10:0.#} {result.ErrorUm.Max:0.#}");
            o.WriteLine($"Rotation error °    {result.RotationDegrees.Median,-10:0.###} {result.RotationDegrees.P95,-10:0.###} {result.RotationDegrees.Max:0.###}");
            o.WriteLine($"Pairwise error px   {result.PairErrorPx.Median,-10:0.###} {result.PairErrorPx.P95,-10:0.###} {result.PairErrorPx.Max:0.###}   (each section against the previous one)");
            o.WriteLine($"Pairwise rotation ° {result.PairRotationDegrees.Median,-10:0.###} {result.PairRotationDegrees.P95,-10:0.###} {result.PairRotationDegrees.Max:0.###}");
            o.WriteLine($"Wrong mirror        {result.MirrorWrong}" + (result.MirrorWrong > 0 ? $" ({(result.MirrorWrong == 1 ? "section" : "sections")} {string.Join(", ", result.Sections.Where(s => s.MirrorWrong).Select(s => s.Number))}; the wrong way up, so not in the error rows above)" : ""));
            o.WriteLine($"Drift px            max {result.DriftMaxPx:0.###}, rms {result.DriftRmsPx:0.###}   (moving average over {TruthEvaluation.DriftWindow} sections)");
            return CliOutput.ExitOk;
        }));
        return command;
    }
}
