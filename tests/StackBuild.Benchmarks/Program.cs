using BenchmarkDotNet.Attributes;
using BenchmarkDotNet.Running;
using MathNet.Numerics;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Register;

namespace StackBuild.Benchmarks;

public static class Program
{
    /// <summary>Run: dotnet run -c Release --project tests/StackBuild.Benchmarks -- --filter '*' --job short</summary>
    public static void Main(string[] args) => BenchmarkSwitcher.FromAssembly(typeof(Program).Assembly).Run(args);
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
