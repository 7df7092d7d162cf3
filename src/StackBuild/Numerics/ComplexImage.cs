using System.Runtime.InteropServices;
using MathNet.Numerics;

namespace StackBuild.Numerics;

/// <summary>
/// A row-major buffer of single-precision complex values (width × height), in native memory aligned to 64
/// bytes so FFTW can run plans made on other aligned buffers on it (FFTW's new-array execute needs the same
/// alignment as the planning arrays). Dispose it when done; a finaliser frees it otherwise.
/// </summary>
public sealed unsafe class ComplexImage : IDisposable
{
    private const nuint Alignment = 64;
    private Complex32* _data;

    public int Width { get; }
    public int Height { get; }
    public int Length => Width * Height;

    public ComplexImage(int width, int height)
    {
        if (width <= 0 || height <= 0) throw new ArgumentOutOfRangeException(nameof(width), "A complex image needs a positive width and height.");
        Width = width;
        Height = height;
        nuint bytes = (nuint)checked(width * height) * (nuint)sizeof(Complex32);
        _data = (Complex32*)NativeMemory.AlignedAlloc(bytes, Alignment);
        NativeMemory.Clear(_data, bytes);
    }

    public Span<Complex32> Span
    {
        get
        {
            ObjectDisposedException.ThrowIf(_data == null, this);
            return new Span<Complex32>(_data, Length);
        }
    }

    public Span<Complex32> Row(int y) => Span.Slice(y * Width, Width);

    internal Complex32* Pointer
    {
        get
        {
            ObjectDisposedException.ThrowIf(_data == null, this);
            return _data;
        }
    }

    /// <summary>Fills the real parts from <paramref name="real"/> (row-major, same size) and clears the imaginary parts.</summary>
    public void SetReal(ReadOnlySpan<float> real)
    {
        if (real.Length != Length) throw new ArgumentException("The real buffer does not match the complex image's size.");
        var s = Span;
        for (int i = 0; i < s.Length; i++) s[i] = new Complex32(real[i], 0f);
    }

    public void Dispose()
    {
        Free();
        GC.SuppressFinalize(this);
    }

    ~ComplexImage() => Free();

    private void Free()
    {
        if (_data == null) return;
        NativeMemory.AlignedFree(_data);
        _data = null;
    }
}

/// <summary>
/// Complex images kept per thread for reuse: each registered pair needs several scratch spectra of the canvas size, and
/// allocating and freeing them in native memory for each of hundreds of pairs left the C library's heap several hundred
/// megabytes larger than what was in use (the ch2bet series of docs/benchmarks.md: peak RSS 643 MB, 483 MB with every
/// such block mapped and unmapped on its own).
/// </summary>
internal static class ComplexImagePool
{
    /// <summary>At most this many images wait on one thread (two canvas sizes, four each: a pair and its half-size pair).</summary>
    private const int MaxSpare = 8;

    [ThreadStatic] private static List<ComplexImage>? _spare;

    /// <summary>An image of that size whose contents are whatever was left in it: the caller writes every element before reading it.</summary>
    public static ComplexImage Rent(int width, int height)
    {
        var spare = _spare;
        if (spare is not null)
            for (int i = spare.Count - 1; i >= 0; i--)
                if (spare[i].Width == width && spare[i].Height == height)
                {
                    var image = spare[i];
                    spare.RemoveAt(i);
                    return image;
                }
        return new ComplexImage(width, height);
    }

    /// <summary>Gives <paramref name="image"/> back for this thread's next <see cref="Rent"/>, or frees it when enough wait.</summary>
    public static void Return(ComplexImage image)
    {
        var spare = _spare ??= [];
        if (spare.Count < MaxSpare) spare.Add(image);
        else image.Dispose();
    }
}
