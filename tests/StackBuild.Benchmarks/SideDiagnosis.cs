using System.Globalization;
using StackBuild.Evaluate;
using StackBuild.Pipeline;
using StackBuild.Series;
using StackBuild.Solve;
using StackBuild.Template;

namespace StackBuild.Benchmarks;

/// <summary>
/// Why did a template build turn sections over? Runs a template build's first stages on a cut series (a folder written by
/// <c>stackbuild cut</c> or <c>accuracy --work</c>) and prints, per section, the side decided from the pairs alone, the
/// template's vote (which side its match from scratch prefers, and by how much), the side decided with the votes, its
/// margin, and the truth's side.
/// <code>dotnet run -c Release --project tests/StackBuild.Benchmarks -- sides DIR TEMPLATE.nii.gz AXIS FIRST_PLANE</code>
/// </summary>
public static class SideDiagnosis
{
    public static void Run(string[] args)
    {
        if (args.Length < 4) throw new ArgumentException("use: sides DIR TEMPLATE.nii.gz AXIS FIRST_PLANE");
        var options = new BuildOptions
        {
            Input = args[0],
            Template = new TemplateOptions { Path = args[1], CutAxis = args[2][0], FirstPlane = double.Parse(args[3], CultureInfo.InvariantCulture) },
        };
        var series = SeriesReader.Open(options.Input, options.Series);
        PlanStage.Check(options, series);
        var plan = PlanStage.Plan(options, series, TemplateVolume.Load(options.Template.Path, options.Template.CutAxis));
        var sections = PrepareStage.Prepare(plan, SectionFiles.Instance, null);
        var slices = TemplateStage.Slice(plan, sections, null);
        var pairs = RegisterStage.Register(plan, sections, slices, null);
        var steps = sections.Sections.Select(w => w.Entry.PositionUm / plan.Series.SpacingUm).ToList();
        var plain = MirrorParity.Decide(sections.Count, pairs.Pairs, steps);
        var truth = SeriesTruth.Read(Path.Combine(args[0], "truth.json"));
        Console.WriteLine("section  pairs-alone (margin)  vote: prefers (lead, similarity)  with votes (margin)  truth");
        for (int n = 0; n < sections.Count; n++)
        {
            int number = sections[n].Entry.Number;
            var m = pairs.SideMatches?[n];
            var vote = m is null ? null : TemplateStage.SideVoteOf(m);
            string v = m is null ? "—" : vote is null ? $"none ({m.Similarity:0.000})"
                : string.Create(CultureInfo.InvariantCulture, $"{(m.Mirrored ? "mirrored" : "unmirrored")} ({Math.Max(vote.Mirrored, vote.Unmirrored):0.000}, {m.Similarity:0.000})");
            bool? t = truth.Sections.TryGetValue(number, out var ts) ? ts.Mirrored : null;
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"{number,5}  {(plain.Flipped[n] ? "down" : "up  ")} ({plain.Margin[n]:0.000})  {v,-34}  {(pairs.Parity.Flipped[n] ? "down" : "up  ")} ({pairs.Parity.Margin[n]:0.000})  {(t is null ? "—" : t.Value ? "down" : "up")}"));
        }
    }
}
