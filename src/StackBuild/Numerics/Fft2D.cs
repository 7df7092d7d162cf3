using MathNet.Numerics;
using MathNet.Numerics.IntegralTransforms;

namespace StackBuild.Numerics;

/// <summary>
/// A 2D discrete Fourier transform of one fixed size, in place on a <see cref="ComplexImage"/>.
/// Forward uses the kernel e^(−2πi·(kx·x/W + ky·y/H)) with no scaling; Inverse uses e^(+2πi…) and scales by
/// 1/(W·H), so Inverse(Forward(x)) = x. Both providers keep this convention.
/// </summary>
public interface IFft2D
{
    int Width { get; }
    int Height { get; }
    string ProviderName { get; }
    void Forward(ComplexImage data);
    void Inverse(ComplexImage data);
}

public enum FftProvider
{
    /// <summary>FFTW when libfftw3f.so.3 loads, unless the environment variable STACKBUILD_FFT=managed says otherwise.</summary>
    Auto,
    Fftw,
    Managed,
}

/// <summary>Chooses the FFT provider: FFTW (Debian libfftw3-single3) when present, else the managed one.</summary>
public static class Fft2D
{
    /// <summary>The environment variable that forces the managed FFT when set to "managed".</summary>
    public const string EnvironmentVariable = "STACKBUILD_FFT";

    /// <summary>The provider <see cref="Create(int, int, FftProvider)"/> uses with <see cref="FftProvider.Auto"/>.</summary>
    public static FftProvider DefaultProvider => Choose(Environment.GetEnvironmentVariable(EnvironmentVariable), Fftw.IsAvailable);

    /// <summary>The rule behind <see cref="DefaultProvider"/>: "managed" (any case) forces the fallback, else FFTW when it loads.</summary>
    internal static FftProvider Choose(string? environmentValue, bool fftwAvailable) =>
        string.Equals(environmentValue?.Trim(), "managed", StringComparison.OrdinalIgnoreCase) || !fftwAvailable
            ? FftProvider.Managed
            : FftProvider.Fftw;

    /// <summary>A readable name of the provider in use with <see cref="FftProvider.Auto"/>.</summary>
    public static string ProviderName => DefaultProvider == FftProvider.Fftw ? Fftw.Description : ManagedFft2D.Description;

    /// <summary>
    /// An FFT of the given size. <see cref="FftProvider.Fftw"/> throws <see cref="InvalidOperationException"/>
    /// naming the Debian package when libfftw3f.so.3 cannot be loaded.
    /// </summary>
    public static IFft2D Create(int width, int height, FftProvider provider = FftProvider.Auto)
    {
        if (width <= 0 || height <= 0) throw new ArgumentOutOfRangeException(nameof(width), "An FFT needs a positive width and height.");
        if (provider == FftProvider.Auto) provider = DefaultProvider;
        if (provider == FftProvider.Managed) return new ManagedFft2D(width, height);
        if (!Fftw.IsAvailable)
            throw new InvalidOperationException($"{Fftw.LibraryName} could not be loaded; install the Debian package libfftw3-single3 (or set {EnvironmentVariable}=managed).");
        return Fftw.Create(width, height);
    }

    /// <summary>
    /// The transform size to pad to for the provider in use: <see cref="NextFastSize"/> for FFTW; the next power
    /// of two for the managed FFT, whose other lengths go through Bluestein's algorithm at several times the cost.
    /// </summary>
    public static int PaddedSize(int minimum) =>
        DefaultProvider == FftProvider.Fftw ? NextFastSize(minimum) : (int)System.Numerics.BitOperations.RoundUpToPowerOf2((uint)Math.Max(1, minimum));

    /// <summary>The smallest n ≥ <paramref name="minimum"/> of the form 2^a·3^b·5^c (sizes FFTs handle fastest).</summary>
    public static int NextFastSize(int minimum)
    {
        for (int n = Math.Max(1, minimum); ; n++)
        {
            int m = n;
            foreach (int p in (ReadOnlySpan<int>)[2, 3, 5]) while (m % p == 0) m /= p;
            if (m == 1) return n;
        }
    }
}

/// <summary>
/// The managed fallback: MathNet.Numerics 1D FFTs on the rows (in parallel), a blocked transpose, the same on
/// the columns, and a transpose back.
/// </summary>
internal sealed class ManagedFft2D : IFft2D
{
    internal const string Description = "managed (MathNet.Numerics 1D FFT, rows in parallel)";
    private const int Block = 32;
    private const FourierOptions Options = FourierOptions.NoScaling; // MathNet's forward kernel is e^(−2πi…), as FFTW's

    public int Width { get; }
    public int Height { get; }
    public string ProviderName => Description;

    public ManagedFft2D(int width, int height)
    {
        Width = width;
        Height = height;
    }

    public void Forward(ComplexImage data) => Transform(data, forward: true);

    public void Inverse(ComplexImage data)
    {
        Transform(data, forward: false);
        float scale = 1f / (Width * Height);
        var s = data.Span;
        for (int i = 0; i < s.Length; i++) s[i] *= scale;
    }

    private unsafe void Transform(ComplexImage data, bool forward)
    {
        if (data.Width != Width || data.Height != Height)
            throw new ArgumentException($"This FFT is for {Width}×{Height}, not {data.Width}×{data.Height}.");
        var scratch = new Complex32[Width * Height];
        fixed (Complex32* t = scratch)
        {
            Complex32* d = data.Pointer, tp = t;
            TransformRows(d, Width, Height, forward);
            Transpose(d, tp, Width, Height);
            TransformRows(tp, Height, Width, forward);
            Transpose(tp, d, Height, Width);
        }
    }

    private static unsafe void TransformRows(Complex32* data, int rowLength, int rows, bool forward)
    {
        nint address = (nint)data;
        Parallel.For(0, rows, () => new Complex32[rowLength], (y, _, row) =>
        {
            var span = new Span<Complex32>((Complex32*)address + (long)y * rowLength, rowLength);
            span.CopyTo(row);
            if (forward) Fourier.Forward(row, Options);
            else Fourier.Inverse(row, Options);
            row.AsSpan().CopyTo(span);
            return row;
        }, _ => { });
    }

    /// <summary>Blocked transpose of a rows×width matrix into a width×rows one (cache-friendly tiles).</summary>
    private static unsafe void Transpose(Complex32* source, Complex32* target, int width, int rows)
    {
        for (int by = 0; by < rows; by += Block)
        for (int bx = 0; bx < width; bx += Block)
        {
            int yEnd = Math.Min(by + Block, rows), xEnd = Math.Min(bx + Block, width);
            for (int y = by; y < yEnd; y++)
            {
                Complex32* src = source + (long)y * width;
                for (int x = bx; x < xEnd; x++) target[(long)x * rows + y] = src[x];
            }
        }
    }
}
