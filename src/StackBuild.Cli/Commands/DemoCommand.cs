using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using StackBuild.Demo;
using StackBuild.Nifti;
using StackBuild.IO;

namespace StackBuild.Cli.Commands;

/// <summary><c>stackbuild demo OUT_DIR</c>: writes the synthetic demo series (images, manifest, truth).</summary>
public static class DemoCommand
{
    public static Command Create(CliOutput console)
    {
        var outDir = new Argument<string>("OUT_DIR")
        {
            Description = "Folder to write the demo series into (created if missing; must be empty unless --force)",
        };
        var force = new Option<bool>("--force")
        {
            Description = "Write into a folder that is not empty: replaces an earlier demo there; never replaces a file the demo did not write",
        };
        var seed = new Option<int>("--seed")
        {
            Description = "Random seed: the same seed gives the same series, byte for byte",
            DefaultValueFactory = _ => new DemoOptions().Seed,
        };
        var sections = new Option<int>("--sections")
        {
            Description = $"Number of sections to cut ({DemoOptions.MinSections}-{DemoOptions.MaxSections})",
            DefaultValueFactory = _ => new DemoOptions().Sections,
        };
        var size = new Option<int>("--size")
        {
            Description = $"Image width in pixels ({DemoOptions.MinSize}-{DemoOptions.MaxSize}); the height is 4/5 of it",
            DefaultValueFactory = _ => new DemoOptions().Size,
        };
        var command = new Command("demo",
            "Write a synthetic demo series: a procedural tissue block cut into sections, each mounted at a random angle " +
            "(some face down) and scanned as a brightfield PNG, with a few sections lost, one torn and one excluded. " +
            "Also writes manifest.csv and truth.json (the true placement of every section).\n\n" +
            "Example:\n  stackbuild demo my-demo --sections 40\n  stackbuild build my-demo -o my-demo-volume.nii.gz\n" +
            "  stackbuild demo my-demo --seed 2 --force   (replace the demo in my-demo)")
        {
            outDir, seed, sections, size, force,
        };
        command.SetAction(parse => console.Guard(() => Run(console,
            parse.GetValue(outDir) ?? "", parse.GetValue(seed), parse.GetValue(sections), parse.GetValue(size), parse.GetValue(force))));
        return command;
    }

    private static int Run(CliOutput console, string outDir, int seed, int sections, int size, bool force)
    {
        var options = CheckedOptions(seed, sections, size);
        bool replacing = CheckOutputFolder(outDir, force);

        var clock = Stopwatch.StartNew();
        console.Progress($"making {options.Sections} sections at {options.Width}×{options.Height} px…");
        var specimen = DemoSpecimenMaker.Make(options);
        if (!replacing) CheckNothingReplaced(outDir, specimen);
        console.Progress($"writing {outDir}…");
        DemoSpecimenMaker.WriteFiles(specimen, outDir);
        WriteTruthVolume(specimen, outDir);
        console.EndProgress();

        int present = specimen.Sections.Count(s => !s.Lost);
        int lost = specimen.Sections.Count(s => s.Lost);
        int mirrored = specimen.Sections.Count(s => s.Mirrored);
        string Numbers(Func<DemoSection, bool> which) =>
            string.Join(", ", specimen.Sections.Where(which).Select(s => s.Number.ToString(CultureInfo.InvariantCulture)));
        long bytes = new DirectoryInfo(outDir).EnumerateFiles().Sum(f => f.Length);
        var o = console.Out;
        o.WriteLine($"{(replacing ? "Replaced the demo in" : "Wrote a demo series to")} {outDir} ({bytes / 1024.0 / 1024.0:0.0} MB, {clock.Elapsed.TotalSeconds:0.0} s):");
        o.WriteLine($"  {present} section images ({options.Width}×{options.Height} px, 8-bit gray PNG, {options.PixelSizeUm:0.##} µm pixels), " +
                    $"{options.Sections} sections cut at {options.SpacingUm:0.##} µm spacing, seed {options.Seed}");
        o.WriteLine($"  lost: {(lost > 0 ? Numbers(s => s.Lost) : "none")}; torn: {Or(Numbers(s => s.Torn))}; excluded: {Or(Numbers(s => s.Excluded))}");
        o.WriteLine($"  {mirrored} mounted face down (not marked in the manifest; registration must find them)");
        o.WriteLine($"  {DemoSpecimenMaker.ManifestFileName} (series manifest), {DemoSpecimenMaker.TruthFileName} (true placement of every section)");
        o.WriteLine($"Next: stackbuild build {outDir} -o {outDir.TrimEnd('/', '\\')}-volume.nii.gz");
        return CliOutput.ExitOk;
    }

    private static string Or(string numbers) => numbers.Length > 0 ? numbers : "none";

    private static DemoOptions CheckedOptions(int seed, int sections, int size)
    {
        var problems = new List<InputProblemException>();
        if (sections is < DemoOptions.MinSections or > DemoOptions.MaxSections)
            problems.Add(new InputProblemException(null, $"--sections {sections} is out of range",
                $"give {DemoOptions.MinSections} to {DemoOptions.MaxSections} sections"));
        if (size is < DemoOptions.MinSize or > DemoOptions.MaxSize)
            problems.Add(new InputProblemException(null, $"--size {size} is out of range",
                $"give an image width of {DemoOptions.MinSize} to {DemoOptions.MaxSize} pixels"));
        var options = new DemoOptions { Seed = seed, Sections = sections, Size = size };
        if (problems.Count == 0 && (long)options.Width * options.Height * options.Sections > DemoOptions.MaxVoxels)
            problems.Add(new InputProblemException(null,
                $"{sections} sections of {options.Width}×{options.Height} px make a truth volume too large to hold in memory",
                "use fewer --sections or a smaller --size"));
        if (problems.Count == 1) throw problems[0];
        if (problems.Count > 1) throw new InputProblemsException(problems);
        return options;
    }

    /// <summary>
    /// Refuses a folder that is not empty unless <paramref name="force"/> is given, so a typo or a repeated command cannot
    /// replace (or later delete) files without being asked. Returns true when an earlier demo will be replaced.
    /// </summary>
    private static bool CheckOutputFolder(string outDir, bool force)
    {
        if (string.IsNullOrWhiteSpace(outDir))
            throw new InputProblemException(null, "no output folder given", "name a folder, for example: stackbuild demo my-demo");
        if (File.Exists(outDir))
            throw new InputProblemException(outDir, "this is a file, not a folder", "choose a new folder name for the demo");
        if (!Directory.Exists(outDir) || !Directory.EnumerateFileSystemEntries(outDir).Any()) return false;
        bool earlierDemo = DemoSpecimenMaker.IsDemoFolder(outDir);
        if (force) return earlierDemo;
        throw earlierDemo
            ? new InputProblemException(outDir, "the folder already holds a demo series",
                "add --force to replace it (files the demo did not write are kept), or choose a new folder")
            : new InputProblemException(outDir, "the folder is not empty and was not made by `stackbuild demo`",
                "choose a new or empty folder, or add --force to add the demo beside what is there (no file is replaced)");
    }

    /// <summary>With --force in a folder that holds no earlier demo: refuses before writing when a demo file would replace one already there.</summary>
    private static void CheckNothingReplaced(string outDir, DemoSpecimen specimen)
    {
        if (!Directory.Exists(outDir)) return;
        var names = specimen.Sections.Select(s => s.FileName).OfType<string>()
            .Concat([DemoSpecimenMaker.ManifestFileName, DemoSpecimenMaker.TruthFileName, DemoSpecimenMaker.TruthVolumeFileName]);
        foreach (var name in names)
            if (Path.Exists(Path.Combine(outDir, name)))
                throw new InputProblemException(Path.Combine(outDir, name), "the demo would replace this file, which an earlier demo did not write",
                    "choose a new or empty folder for the demo, or move this file elsewhere first");
    }

    /// <summary>Writes truth.nii.gz next to the series: the truth volume as NIfTI-1: stain density stored in 8 bits with scl_slope (steps of 1/255 of the range).</summary>
    private static void WriteTruthVolume(DemoSpecimen specimen, string outDir) =>
        NiftiFile.Write(Path.Combine(outDir, DemoSpecimenMaker.TruthVolumeFileName), specimen.Truth,
            new NiftiWriteOptions { DataType = NiftiDataType.UInt8, Description = "StackBuild demo truth: stain density 0-1" });
}
