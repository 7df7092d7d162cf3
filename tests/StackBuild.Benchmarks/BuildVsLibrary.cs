using System.Diagnostics;
using System.Globalization;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Register;

namespace StackBuild.Benchmarks;

/// <summary>
/// The whole build against a general-library pipeline in the same run (docs/benchmarks.md, "Whole build against a
/// general-library pipeline"): cuts a truth series from a volume with the Release CLI (<c>stackbuild cut</c>), then runs
/// tests/tools/skimage_build_baseline.py and <c>stackbuild build --verbose</c> on it, each as its own process under
/// <c>/usr/bin/time -v</c>, and prints wall and CPU time, peak resident memory, time per section, the output volumes'
/// sizes and the ratios. Then one pair: StackBuild's full pair registration (any angle, both mountings, 1/20 px) against
/// scikit-image's translation-only phase_cross_correlation (upsample 20) on the same two sections at the same size.
/// <code>
/// dotnet build -c Release src/StackBuild.Cli
/// dotnet run -c Release --project tests/StackBuild.Benchmarks -- build-vs-library [--volume V.nii.gz] [--axis k] [--every 2]
///     [--pixel-size 423.828125] [--jobs 2] [--work DIR] [--repeat 7] [--pair-only]
/// </code>
/// The defaults cut ch2bet (mricron-data) along k, every 2nd plane, at 423.8 µm pixels: 76 sections (72 scanned) on
/// 768² canvases. Times are of this machine under whatever else runs on it: the load average is printed before and after.
/// </summary>
public static class BuildVsLibrary
{
    public static void Run(string[] args)
    {
        string volume = "/usr/share/mricron/templates/ch2bet.nii.gz", axis = "k", pixel = "423.828125";
        int every = 2, jobs = Environment.ProcessorCount, repeat = 7;
        string? work = null;
        bool pairOnly = false;
        for (int i = 0; i < args.Length; i++)
        {
            string Next() => i + 1 < args.Length ? args[++i] : throw new ArgumentException($"{args[i]} needs a value");
            switch (args[i])
            {
                case "--volume": volume = Next(); break;
                case "--axis": axis = Next(); break;
                case "--every": every = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--pixel-size": pixel = Next(); break;
                case "--jobs": jobs = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--work": work = Next(); break;
                case "--repeat": repeat = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--pair-only": pairOnly = true; break;
                default: throw new ArgumentException($"unknown option {args[i]}: use --volume, --axis, --every, --pixel-size, --jobs, --work, --repeat, --pair-only");
            }
        }
        var root = RepositoryRoot();
        var cli = Path.Combine(root, "src/StackBuild.Cli/bin/Release/net10.0/stackbuild");
        if (!File.Exists(cli)) throw new InvalidOperationException($"{cli} is missing: run 'dotnet build -c Release src/StackBuild.Cli' first");
        var tool = Path.Combine(root, "tests/tools/skimage_build_baseline.py");
        bool keep = work is not null;
        work ??= Directory.CreateTempSubdirectory("sb-build-vs-library-").FullName;
        Directory.CreateDirectory(work);
        try
        {
            var series = Path.Combine(work, "series");
            if (!File.Exists(Path.Combine(series, "manifest.csv")))
                Check(RunProcess(cli, ["cut", volume, series, "--axis", axis, "--every", every.ToString(CultureInfo.InvariantCulture), "--pixel-size", pixel]), "stackbuild cut");
            var scans = Directory.GetFiles(series, "*.png").Order(StringComparer.Ordinal).ToArray();
            double spacing = ManifestNumber(Path.Combine(series, "manifest.csv"), "spacing_um");
            Console.WriteLine($"series: {series}, {scans.Length} scanned sections, {Canvas(scans[0])}, pixel {pixel} µm, spacing {spacing} µm");
            Console.WriteLine($"machine: {Environment.ProcessorCount} cores, load average before: {LoadAverage()}");
            if (!pairOnly) Whole(cli, tool, series, work, scans.Length, pixel, spacing, jobs);
            Pair(tool, scans, repeat);
            Console.WriteLine($"load average after: {LoadAverage()}");
        }
        finally
        {
            if (!keep) try { Directory.Delete(work, true); } catch (IOException) { }
        }
    }

    private static void Whole(string cli, string tool, string series, string work, int sections, string pixel, double spacing, int jobs)
    {
        var baselineOut = Path.Combine(work, "baseline.nii.gz");
        var baseline = Timed(["/usr/bin/python3", tool, series, baselineOut, "--pixel-um", pixel,
            "--spacing-um", spacing.ToString("R", CultureInfo.InvariantCulture), "--jobs", jobs.ToString(CultureInfo.InvariantCulture)], Path.Combine(work, "baseline.time"));
        Console.WriteLine($"baseline (scikit-image, {jobs} processes) said:\n  " + baseline.Stderr.Trim().Replace("\n", "\n  "));
        var ours = Path.Combine(work, "stackbuild.nii.gz");
        var build = Timed([cli, "build", series, "-o", ours, "--verbose"], Path.Combine(work, "stackbuild.time"));
        Console.WriteLine("stackbuild build --verbose said (stderr):\n  " + build.Stderr.Trim().Replace("\n", "\n  "));

        var (baseVoxels, baseFile) = VolumeSize(baselineOut);
        var (ourVoxels, ourFile) = VolumeSize(ours);
        Console.WriteLine();
        Console.WriteLine("| run | wall | CPU (user + sys) | wall a section | peak RSS | output volume (voxel data / file) |");
        Console.WriteLine("| --- | ---: | ---: | ---: | ---: | ---: |");
        Console.WriteLine(Row("scikit-image baseline", baseline, sections, baseVoxels, baseFile));
        Console.WriteLine(Row("stackbuild build", build, sections, ourVoxels, ourFile));
        Console.WriteLine();
        Console.WriteLine(F($"baseline / stackbuild: wall {baseline.Wall / build.Wall:0.00}×, CPU {baseline.Cpu / build.Cpu:0.00}× (target: wall ≥ 20×)"));
        double limitMb = 1.5 * ourVoxels / 1048576.0 + 250;
        Console.WriteLine(F($"stackbuild peak RSS {build.PeakRssMb:0} MB against 1.5 × its output volume's voxel data + 250 MB = {limitMb:0} MB ({build.PeakRssMb / limitMb:0.0}× the target); {build.PeakRssMb * 1048576.0 / ourVoxels:0}× the voxel data"));
        Console.WriteLine(F($"stackbuild wall a section {build.Wall / sections * 1000:0} ms (heading for 30 ms)"));
    }

    /// <summary>StackBuild's <see cref="SectionRegistration.Register"/> and scikit-image's translation-only phase correlation on one pair.</summary>
    private static void Pair(string tool, string[] scans, int repeat)
    {
        string fixedPath = scans[scans.Length / 2 - 1], movingPath = scans[scans.Length / 2];
        var options = new RegistrationOptions();
        var fixedScan = SectionImageReader.ReadGray(fixedPath);
        var movingScan = SectionImageReader.ReadGray(movingPath);
        SectionRegistration.Prepare(fixedScan, options); // FFT plans made before measuring
        var prepareClock = Stopwatch.StartNew();
        var fixedSection = SectionRegistration.Prepare(fixedScan, options);
        var movingSection = SectionRegistration.Prepare(movingScan, options);
        prepareClock.Stop();
        SectionRegistration.Register(fixedSection, movingSection, options); // FFT plans made before measuring
        var times = new List<double>();
        PairResult? result = null;
        var process = Process.GetCurrentProcess();
        var cpuBefore = process.TotalProcessorTime;
        for (int r = 0; r < repeat; r++)
        {
            var clock = Stopwatch.StartNew();
            result = SectionRegistration.Register(fixedSection, movingSection, options);
            times.Add(clock.Elapsed.TotalSeconds);
        }
        process.Refresh();
        double oursCpu = (process.TotalProcessorTime - cpuBefore).TotalSeconds / repeat;
        double ours = Median(times);
        var skimage = RunProcess("/usr/bin/python3", [tool, "--time-pair", fixedPath, movingPath, "--size", options.WorkSize.ToString(CultureInfo.InvariantCulture),
            "--repeat", repeat.ToString(CultureInfo.InvariantCulture)]);
        Check(skimage, "skimage_build_baseline.py --time-pair");
        var lines = skimage.Stdout.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        double theirs = double.Parse(lines.First(l => l.StartsWith("pcc_seconds ", StringComparison.Ordinal))["pcc_seconds ".Length..], CultureInfo.InvariantCulture);
        string size = lines.First(l => l.StartsWith("size ", StringComparison.Ordinal))["size ".Length..];
        Console.WriteLine();
        Console.WriteLine($"pair {Path.GetFileName(fixedPath)} ← {Path.GetFileName(movingPath)}, working size {fixedSection.WorkImage.Width}×{fixedSection.WorkImage.Height} " +
            $"(scikit-image: {size}), median of {repeat}:");
        Console.WriteLine(F($"  StackBuild SectionRegistration.Register (any angle, both mountings, 1/20 px): {ours * 1000:0.0} ms (rotation {result!.Best.RotationDegrees:0.00}°, mirrored {result.Best.Mirrored}, confidence {result.Confidence:0.00}); preparing the two sections once: {prepareClock.Elapsed.TotalMilliseconds:0} ms"));
        Console.WriteLine(F($"  StackBuild's CPU time a pair (the process's, mean of the {repeat}; less sensitive to other load than wall time): {oursCpu * 1000:0.0} ms"));
        Console.WriteLine(F($"  scikit-image phase_cross_correlation (translation only, upsample 20): {theirs * 1000:0.0} ms"));
        Console.WriteLine(F($"  StackBuild / scikit-image: {ours / theirs:0.00}× the time (target: below 1)"));
    }

    internal sealed record Measured(double Wall, double Cpu, double PeakRssMb, string Stderr);

    internal static Measured Timed(string[] command, string timeFile)
    {
        var run = RunProcess("/usr/bin/time", ["-v", "-o", timeFile, .. command]);
        Check(run, string.Join(' ', command.Take(2)));
        var facts = File.ReadAllLines(timeFile).Select(l => l.Trim()).Where(l => l.Contains(": ")).ToDictionary(l => l[..l.LastIndexOf(": ", StringComparison.Ordinal)], l => l[(l.LastIndexOf(": ", StringComparison.Ordinal) + 2)..]);
        double Seconds(string key) => double.Parse(facts[key], CultureInfo.InvariantCulture);
        var wallParts = facts["Elapsed (wall clock) time (h:mm:ss or m:ss)"].Split(':').Select(p => double.Parse(p, CultureInfo.InvariantCulture)).Reverse().ToArray();
        double wall = wallParts[0] + 60 * wallParts[1] + (wallParts.Length > 2 ? 3600 * wallParts[2] : 0);
        return new Measured(wall, Seconds("User time (seconds)") + Seconds("System time (seconds)"), Seconds("Maximum resident set size (kbytes)") / 1024, run.Stderr);
    }

    private static string Row(string name, Measured m, int sections, long voxelBytes, long fileBytes) =>
        F($"| {name} | {m.Wall:0.0} s | {m.Cpu:0.0} s | {m.Wall / sections * 1000:0} ms | {m.PeakRssMb:0} MB | {voxelBytes / 1048576.0:0.0} MB / {fileBytes / 1048576.0:0.0} MB |");

    /// <summary>The volume's voxel data in bytes (from its header) and its file's size.</summary>
    private static (long Voxels, long File) VolumeSize(string path)
    {
        var header = NiftiFile.ReadHeader(path);
        long voxels = header.Shape.Aggregate(1L, (p, n) => p * n) * (header.BitPix / 8);
        return (voxels, new FileInfo(path).Length);
    }

    private static string Canvas(string png)
    {
        var facts = SectionImageReader.Identify(png);
        return $"{facts.Width}×{facts.Height} px";
    }

    private static double ManifestNumber(string manifest, string key)
    {
        foreach (var line in File.ReadLines(manifest))
            if (line.StartsWith("#!", StringComparison.Ordinal) && line[2..].Split('=') is [var k, var v] && k.Trim() == key)
                return double.Parse(v.Trim(), CultureInfo.InvariantCulture);
        throw new InvalidOperationException($"{manifest} has no '#! {key} = …' line");
    }

    internal static string LoadAverage() => File.Exists("/proc/loadavg") ? string.Join(' ', File.ReadAllText("/proc/loadavg").Split(' ').Take(3)) : "unknown";

    internal static double Median(List<double> values)
    {
        var sorted = values.Order().ToList();
        return sorted.Count % 2 == 1 ? sorted[sorted.Count / 2] : (sorted[sorted.Count / 2 - 1] + sorted[sorted.Count / 2]) / 2;
    }

    internal static string F(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);

    internal sealed record ProcessRun(int Code, string Stdout, string Stderr);

    internal static ProcessRun RunProcess(string file, IEnumerable<string> arguments)
    {
        var start = new ProcessStartInfo(file) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (var a in arguments) start.ArgumentList.Add(a);
        using var process = Process.Start(start) ?? throw new InvalidOperationException($"could not start {file}");
        var stdout = process.StandardOutput.ReadToEndAsync();
        var stderr = process.StandardError.ReadToEndAsync();
        process.WaitForExit();
        return new ProcessRun(process.ExitCode, stdout.Result, stderr.Result);
    }

    internal static void Check(ProcessRun run, string what)
    {
        if (run.Code != 0) throw new InvalidOperationException($"{what} failed (exit {run.Code}):\n{run.Stdout}\n{run.Stderr}");
    }

    internal static string RepositoryRoot()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !File.Exists(Path.Combine(dir.FullName, "tests/tools/skimage_build_baseline.py"))) dir = dir.Parent;
        return dir?.FullName ?? throw new InvalidOperationException("the repository (tests/tools/skimage_build_baseline.py) was not found above the benchmark");
    }
}
