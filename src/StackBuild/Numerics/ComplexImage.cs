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
