using MathNet.Numerics;
using StackBuild.Register;
using Xunit;
using StackBuild.Numerics;

namespace StackBuild.Tests;

/// <summary>
/// The two FFT providers against each other and against analytic transforms (DFT definition, common practice).
/// FFTW comes from the Debian package libfftw3-single3; without it these tests fail and say so.
/// </summary>
public class RegisterFftTests
{
    private static IFft2D Fftw(int w, int h)
    {
        try { return Fft2D.Create(w, h, FftProvider.Fftw); }
        catch (InvalidOperationException e) { Assert.Fail($"FFTW is required (Debian package libfftw3-single3): {e.Message}"); throw; }
    }

    private static ComplexImage Random(int w, int h, int seed)
    {
        var rng = new System.Random(seed);
        var c = new ComplexImage(w, h);
        var s = c.Span;
        for (int i = 0; i < s.Length; i++) s[i] = new Complex32((float)(rng.NextDouble() - 0.5), (float)(rng.NextDouble() - 0.5));
        return c;
    }

    private static double RelativeDifference(ReadOnlySpan<Complex32> a, ReadOnlySpan<Complex32> b)
    {
        double maxDiff = 0, maxValue = 0;
        for (int i = 0; i < a.Length; i++)
        {
            maxDiff = Math.Max(maxDiff, (a[i] - b[i]).Magnitude);
            maxValue = Math.Max(maxValue, a[i].Magnitude);
        }
        return maxDiff / maxValue;
    }

    [Theory]
    [InlineData(512, 512)]
    [InlineData(320, 240)]
    [InlineData(97, 61)]
    public void FftwAndManagedAgree(int w, int h)
    {
        using var a = Random(w, h, w + h);
        using var b = Random(w, h, w + h);
        Fftw(w, h).Forward(a);
        Fft2D.Create(w, h, FftProvider.Managed).Forward(b);
        Assert.True(RelativeDifference(a.Span, b.Span) < 1e-4, $"forward differs by {RelativeDifference(a.Span, b.Span):g3}");
        Fftw(w, h).Inverse(a);
        Fft2D.Create(w, h, FftProvider.Managed).Inverse(b);
        Assert.True(RelativeDifference(a.Span, b.Span) < 1e-4, $"inverse differs by {RelativeDifference(a.Span, b.Span):g3}");
    }

    [Theory]
    [InlineData(FftProvider.Fftw)]
    [InlineData(FftProvider.Managed)]
    public void DeltaTransformsToAPlaneWaveAndBack(FftProvider provider)
    {
        // DFT of δ(x − 3, y − 5) is e^(−2πi(3kx/W + 5ky/H)) with FFTW's sign convention.
        const int w = 30, h = 20;
        var fft = provider == FftProvider.Fftw ? Fftw(w, h) : Fft2D.Create(w, h, provider);
        using var d = new ComplexImage(w, h);
        d.Span[5 * w + 3] = Complex32.One;
        fft.Forward(d);
        for (int ky = 0; ky < h; ky++)
        for (int kx = 0; kx < w; kx++)
        {
            double a = -2 * Math.PI * (3.0 * kx / w + 5.0 * ky / h);
            var v = d.Span[ky * w + kx];
            Assert.Equal(Math.Cos(a), v.Real, 1e-5);
            Assert.Equal(Math.Sin(a), v.Imaginary, 1e-5);
        }
        fft.Inverse(d);
        for (int i = 0; i < w * h; i++) Assert.Equal(i == 5 * w + 3 ? 1.0 : 0.0, d.Span[i].Real, 1e-5);
    }

    [Theory]
    [InlineData(null, true, FftProvider.Fftw)]
    [InlineData("", true, FftProvider.Fftw)]
    [InlineData("fftw", true, FftProvider.Fftw)]
    [InlineData("managed", true, FftProvider.Managed)]
    [InlineData("Managed ", true, FftProvider.Managed)]
    [InlineData(null, false, FftProvider.Managed)]
    public void TheEnvironmentVariableForcesTheManagedFft(string? value, bool fftwAvailable, FftProvider expected) =>
        Assert.Equal(expected, Fft2D.Choose(value, fftwAvailable));

    [Fact]
    public void TheProviderNameSaysWhichFftIsInUse()
    {
        var expected = Fft2D.Choose(Environment.GetEnvironmentVariable(Fft2D.EnvironmentVariable), fftwAvailable: true);
        Assert.Contains(expected == FftProvider.Managed ? "managed" : "FFTW", Fft2D.ProviderName);
        Assert.Equal(Fft2D.ProviderName, Fft2D.Create(8, 8).ProviderName);
    }

    [Theory]
    [InlineData(1, 1)]
    [InlineData(7, 8)]
    [InlineData(97, 100)]
    [InlineData(321, 324)]
    [InlineData(512, 512)]
    public void NextFastSizeIsSmallestProductOfTwoThreeFive(int minimum, int expected) =>
        Assert.Equal(expected, Fft2D.NextFastSize(minimum));
}
