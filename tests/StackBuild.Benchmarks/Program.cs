using BenchmarkDotNet.Attributes;
using BenchmarkDotNet.Running;
using MathNet.Numerics;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;
using StackBuild.Numerics;

namespace StackBuild.Benchmarks;

public static class Program
{
    /// <summary>Run: dotnet run -c Release --project tests/StackBuild.Benchmarks -- --filter '*' --job short</summary>
    /// <summary>The accuracy table of whole-specimen series (docs/accuracy.md): dotnet run -c Release --project tests/StackBuild.Benchmarks -- accuracy</summary>
    /// <summary>The whole build against a general-library pipeline (docs/benchmarks.md): ... -- build-vs-library</summary>
    /// <summary>A build run again on its kept pairs against one without them (docs/benchmarks.md): ... -- pair-cache</summary>
    public static void Main(string[] args)
    {
        FftPlanCache.Load(); // as the command line does: FFTW's plans from earlier runs
        try
        {
            if (args.Length > 0 && args[0] == "accuracy") { AccuracyTable.Run(args[1..]); return; }
            if (args.Length > 0 && args[0] == "pairs") { PairDiagnosis.Run(args[1..]); return; }
            if (args.Length > 0 && args[0] == "sides") { SideDiagnosis.Run(args[1..]); return; }
            if (args.Length > 0 && args[0] == "build-vs-library") { BuildVsLibrary.Run(args[1..]); return; }
            if (args.Length > 0 && args[0] == "pair-cache") { PairCacheBenchmark.Run(args[1..]); return; }
            if (args.Length > 0 && args[0] == "large-apply") { LargeApply.Run(args[1..]); return; }
            BenchmarkSwitcher.FromAssembly(typeof(Program).Assembly).Run(args);
        }
        finally { FftPlanCache.Save(); }
    }
}

/// <summary>One in-place forward 2D FFT of 512×512 single-precision complex values; the managed FFT is the baseline.</summary>
[MemoryDiagnoser]
public class FftBenchmarks
{
    private const int Size = 512;
    private ComplexImage _data = null!;
    private IFft2D _managed = null!, _fftw = null!;

    [GlobalSetup]
    public void Setup()
    {
        _data = new ComplexImage(Size, Size);
        var rng = new Random(1);
        var s = _data.Span;
        for (int i = 0; i < s.Length; i++) s[i] = new Complex32((float)rng.NextDouble(), 0);
        _managed = Fft2D.Create(Size, Size, FftProvider.Managed);
        _fftw = Fft2D.Create(Size, Size, FftProvider.Fftw);
    }

    [GlobalCleanup]
    public void Cleanup() => _data.Dispose();

    [Benchmark(Baseline = true)]
    public void ManagedForward512() => _managed.Forward(_data);

    [Benchmark]
    public void FftwForward512() => _fftw.Forward(_data);
}

/// <summary>
/// A full pair registration (rotation at any angle, mirror tried, translation to 1/20 px) at working size 512,
/// from sections already prepared, with each FFT provider (managed = baseline); and the preparation of one
/// 2048×2048 scan.
/// </summary>
[MemoryDiagnoser]
public class RegistrationBenchmarks
{
    private readonly RegistrationOptions _options = new();
    private GrayImage _scan = null!;
    private PreparedSection _fixed = null!, _moving = null!;

    private void Setup(string provider)
    {
        Environment.SetEnvironmentVariable(Fft2D.EnvironmentVariable, provider);
        _scan = Specimen(2048, 2048, seed: 4);
        var moved = Move(_scan, Transform2D.Rotation(63.4, 1023.5, 1023.5).Then(Transform2D.Translation(31.3, -17.8)));
        _fixed = SectionRegistration.Prepare(_scan, _options);
        _moving = SectionRegistration.Prepare(moved, _options);
        SectionRegistration.Register(_fixed, _moving, _options); // plans made before measuring
    }

    [GlobalSetup(Targets = [nameof(RegisterPairManaged)])]
    public void SetupManaged() => Setup("managed");

    [GlobalSetup(Targets = [nameof(RegisterPairFftw), nameof(PrepareScan2048)])]
    public void SetupFftw() => Setup("");

    [Benchmark(Baseline = true)]
    public PairResult RegisterPairManaged() => SectionRegistration.Register(_fixed, _moving, _options);

    [Benchmark]
    public PairResult RegisterPairFftw() => SectionRegistration.Register(_fixed, _moving, _options);

    [Benchmark]
    public PreparedSection PrepareScan2048() => SectionRegistration.Prepare(_scan, _options);

    /// <summary>A textured elliptical specimen (random soft spots) on a dark slide.</summary>
    private static GrayImage Specimen(int w, int h, int seed)
    {
        var rng = new Random(seed);
        var spots = Enumerable.Range(0, 40).Select(_ => (X: w * (0.25 + 0.5 * rng.NextDouble()), Y: h * (0.3 + 0.4 * rng.NextDouble()), R: w * (0.01 + 0.04 * rng.NextDouble()))).ToArray();
        var image = new GrayImage(w, h);
        Parallel.For(0, h, y =>
        {
            for (int x = 0; x < w; x++)
            {
                double ex = (x - w / 2.0) / (0.32 * w), ey = (y - h / 2.0) / (0.24 * h);
                if (ex * ex + ey * ey > 1) continue;
                double v = 0.4;
                foreach (var s in spots) v += 0.3 * Math.Exp(-((x - s.X) * (x - s.X) + (y - s.Y) * (y - s.Y)) / (2 * s.R * s.R));
                image[x, y] = (float)Math.Min(1, v);
            }
        });
        return image;
    }

    private static GrayImage Move(GrayImage source, Transform2D moveBy)
    {
        var inverse = moveBy.Inverse();
        var result = new GrayImage(source.Width, source.Height);
        Parallel.For(0, source.Height, y =>
        {
            for (int x = 0; x < source.Width; x++)
            {
                var (sx, sy) = inverse.Apply(x, y);
                result[x, y] = source.SampleBilinear(sx, sy);
            }
        });
        return result;
    }
}

/// <summary>
/// Whole builds of the committed demo series (55 sections of 256 px): the plain neighbour chain is the baseline;
/// the reference-free global solve, template guidance (template = the demo's truth volume 2× coarser with square-root
/// contrast, made in the setup) and resampling to 25 µm planes cost what they add on top of it.
/// </summary>
[MemoryDiagnoser]
[SimpleJob(BenchmarkDotNet.Engines.RunStrategy.Monitoring, launchCount: 1, warmupCount: 1, iterationCount: 3)]
public class BuildBenchmarks
{
    private string _series = null!, _template = null!;

    [GlobalSetup]
    public void Setup()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !Directory.Exists(Path.Combine(dir.FullName, "demo-series"))) dir = dir.Parent;
        _series = Path.Combine(dir?.FullName ?? throw new InvalidOperationException("demo-series not found above the benchmark"), "demo-series");
        var truth = StackBuild.Nifti.NiftiFile.Read(Path.Combine(_series, "truth.nii.gz")).ToVolume();
        int nx = truth.Nx / 2, ny = truth.Ny / 2, nz = truth.Nz / 2;
        float max = truth.Voxels.Max();
        var coarse = new float[nx * ny * nz];
        for (int k = 0; k < nz; k++)
        for (int j = 0; j < ny; j++)
        for (int i = 0; i < nx; i++)
        {
            float sum = 0;
            for (int d = 0; d < 8; d++) sum += truth[2 * i + (d & 1), 2 * j + ((d >> 1) & 1), 2 * k + (d >> 2)];
            coarse[(k * ny + j) * nx + i] = 200 * MathF.Sqrt(Math.Max(0, sum / 8 / max));
        }
        // Block means: voxel (i, j, k) of the coarse grid sits at the centre of truth voxels 2i … 2i + 1.
        var a = truth.Affine;
        var affine = Affine.FromRows(
            [2 * a[0, 0], 2 * a[0, 1], 2 * a[0, 2], a[0, 3] + 0.5 * (a[0, 0] + a[0, 1] + a[0, 2])],
            [2 * a[1, 0], 2 * a[1, 1], 2 * a[1, 2], a[1, 3] + 0.5 * (a[1, 0] + a[1, 1] + a[1, 2])],
            [2 * a[2, 0], 2 * a[2, 1], 2 * a[2, 2], a[2, 3] + 0.5 * (a[2, 0] + a[2, 1] + a[2, 2])]);
        _template = Path.Combine(Path.GetTempPath(), $"stackbuild-bench-template-{Environment.ProcessId}.nii.gz");
        StackBuild.Nifti.NiftiFile.Write(_template, new Volume(nx, ny, nz, affine, coarse));
    }

    [GlobalCleanup]
    public void Cleanup() => File.Delete(_template);

    [Benchmark(Baseline = true)]
    public object ChainBuild() => StackBuild.Pipeline.BuildPipeline.Run(new StackBuild.Pipeline.BuildOptions { Input = _series });

    [Benchmark]
    public object SmoothingBuild() => StackBuild.Pipeline.BuildPipeline.Run(new StackBuild.Pipeline.BuildOptions
    {
        Input = _series, Solver = StackBuild.Solve.PlacementSolver.Smoothing, Smoothing = new StackBuild.Solve.SmoothingOptions { Strength = 0 },
    });

    [Benchmark]
    public object TemplateBuild() => StackBuild.Pipeline.BuildPipeline.Run(new StackBuild.Pipeline.BuildOptions
    {
        Input = _series, Template = new StackBuild.Pipeline.TemplateOptions { Path = _template },
    });

    [Benchmark]
    public object VoxelSize25Build() => StackBuild.Pipeline.BuildPipeline.Run(new StackBuild.Pipeline.BuildOptions { Input = _series, VoxelSizeUm = 25 });
}

/// <summary>
/// Writing one 8-bit volume of 1024 × 1024 × 64 voxels (a smooth pattern with noise, so it compresses as tissue does) as
/// gzip-compressed NIfTI-1 (the baseline) and as an OME-Zarr image with its coarser levels (zlib level 6 chunks). The
/// allocation column shows what the Zarr writer holds besides the volume: its slabs (one chunk's depth of planes per level).
/// </summary>
[MemoryDiagnoser]
public class VolumeWriteBenchmarks
{
    private Volume _volume = null!;
    private string _folder = null!;

    [GlobalSetup]
    public void Setup()
    {
        _volume = new Volume(1024, 1024, 64, Affine.FromRows([0.02, 0, 0, 0], [0, 0.02, 0, 0], [0, 0, 0.05, 0]));
        var rng = new Random(3);
        for (int k = 0; k < _volume.Nz; k++)
            for (int j = 0; j < _volume.Ny; j++)
                for (int i = 0; i < _volume.Nx; i++)
                    _volume[i, j, k] = MathF.Round(120 + 60 * MathF.Sin(i * 0.02f + k * 0.1f) * MathF.Cos(j * 0.015f) + rng.Next(12));
        _folder = Directory.CreateTempSubdirectory("sb-bench-write-").FullName;
    }

    [GlobalCleanup]
    public void Cleanup() => Directory.Delete(_folder, recursive: true);

    [Benchmark(Baseline = true)]
    public void NiftiGz()
    {
        var path = Path.Combine(_folder, "v.nii.gz");
        StackBuild.Nifti.NiftiFile.Write(path, _volume, new StackBuild.Nifti.NiftiWriteOptions { DataType = StackBuild.Nifti.NiftiDataType.UInt8 });
        File.Delete(path);
    }

    [Benchmark]
    public void OmeZarr()
    {
        var path = Path.Combine(_folder, "v.ome.zarr");
        Directory.CreateDirectory(path);
        StackBuild.Zarr.OmeZarrWriter.Write(path, _volume, StackBuild.Zarr.ZarrElementType.UInt8, "v", "benchmark");
        Directory.Delete(path, recursive: true);
    }
}
