using System.Diagnostics;
using System.IO.Compression;
using System.Security.Cryptography;
using static StackBuild.Benchmarks.BuildVsLibrary;

namespace StackBuild.Benchmarks;

/// <summary>
/// What keeping registered pairs between builds saves (docs/benchmarks.md, "Pairs kept between builds"): the Release CLI
/// builds the committed demo series, each build its own process, in rounds of four taken one after the other so the
/// machine's load falls on all of them alike: without the cache (<c>--no-cache</c>, the baseline), into an empty cache
/// (what keeping costs), again on the filled cache (a run after an interruption), and on the filled cache with a later
/// stage's option changed (<c>--voxel-size 25</c>). Prints each build's wall time, the medians and their ratios to the
/// baseline, and checks that the cached builds wrote the baseline's volume byte for byte.
/// <code>
/// dotnet build -c Release src/StackBuild.Cli
/// dotnet run -c Release --project tests/StackBuild.Benchmarks -- pair-cache [--rounds 3] [--series DIR]
/// </code>
/// </summary>
public static class PairCacheBenchmark
{
    public static void Run(string[] args)
    {
        var root = RepositoryRoot();
        string series = Path.Combine(root, "demo-series");
        int rounds = 3;
        for (int i = 0; i < args.Length; i++)
        {
            string Next() => i + 1 < args.Length ? args[++i] : throw new ArgumentException($"{args[i]} needs a value");
            switch (args[i])
            {
                case "--rounds": rounds = int.Parse(Next(), System.Globalization.CultureInfo.InvariantCulture); break;
                case "--series": series = Next(); break;
                default: throw new ArgumentException($"unknown option {args[i]}: use --rounds, --series");
            }
        }
        var cli = Path.Combine(root, "src/StackBuild.Cli/bin/Release/net10.0/stackbuild");
        if (!File.Exists(cli)) throw new InvalidOperationException($"{cli} is missing: run 'dotnet build -c Release src/StackBuild.Cli' first");
        var work = Directory.CreateTempSubdirectory("sb-pair-cache-").FullName;
        Console.WriteLine(F($"series {series}, {rounds} rounds; load average before: {LoadAverage()}"));
        var kinds = new[] { "no cache (baseline)", "empty cache (filled)", "filled cache", "filled cache, --voxel-size 25" };
        var times = kinds.ToDictionary(k => k, _ => new List<double>());
        try
        {
            for (int round = 1; round <= rounds; round++)
            {
                var folder = Directory.CreateDirectory(Path.Combine(work, $"round{round}")).FullName;
                var cache = Path.Combine(folder, "cache");
                string Out(string name) => Path.Combine(folder, name);
                var runs = new (string Kind, string[] Args)[]
                {
                    (kinds[0], ["build", series, "-o", Out("plain.nii.gz"), "--no-cache"]),
                    (kinds[1], ["build", series, "-o", Out("fill.nii.gz"), "--cache", cache]),
                    (kinds[2], ["build", series, "-o", Out("again.nii.gz"), "--cache", cache]),
                    (kinds[3], ["build", series, "-o", Out("fine.nii.gz"), "--cache", cache, "--voxel-size", "25"]),
                };
                foreach (var (kind, arguments) in runs)
                {
                    var clock = Stopwatch.StartNew();
                    Check(RunProcess(cli, arguments), $"stackbuild {string.Join(' ', arguments)}");
                    double seconds = clock.Elapsed.TotalSeconds;
                    times[kind].Add(seconds);
                    Console.WriteLine(F($"round {round}  {kind,-30} {seconds,7:0.00} s"));
                }
                var plain = VoxelHash(Out("plain.nii.gz"));
                foreach (var name in new[] { "fill.nii.gz", "again.nii.gz" })
                    if (VoxelHash(Out(name)) != plain) throw new InvalidOperationException($"round {round}: {name} differs from the build without the cache");
                Console.WriteLine(F($"round {round}  cached volumes identical to the uncached one; {Directory.GetFiles(cache, "*.pair").Length} pairs in the cache"));
            }
        }
        finally { Directory.Delete(work, recursive: true); }
        Console.WriteLine(F($"load average after: {LoadAverage()}"));
        double baseline = Median(times[kinds[0]]);
        Console.WriteLine();
        Console.WriteLine("| build | median wall | ratio to no cache |");
        Console.WriteLine("| --- | ---: | ---: |");
        foreach (var kind in kinds)
        {
            double median = Median(times[kind]);
            Console.WriteLine(F($"| {kind} | {median:0.00} s | {median / baseline:0.00} |"));
        }
    }

    private static string VoxelHash(string gz)
    {
        using var gzip = new GZipStream(File.OpenRead(gz), CompressionMode.Decompress);
        return Convert.ToHexString(SHA256.HashData(gzip));
    }
}
