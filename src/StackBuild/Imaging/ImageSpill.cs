using System.Runtime.InteropServices;
using Microsoft.Win32.SafeHandles;

namespace StackBuild.Imaging;

/// <summary>
/// A scratch file for images a build needs again after the stage that made them (every section's working image: read
/// once, registered in series order, then looked at again by the template, frame and record stages), so that the memory a
/// build holds does not grow with the number of sections. Each image is written once, as its 32-bit floats, and read back
/// whole when asked for; what is read back is the same to the bit.
/// </summary>
/// <remarks>
/// The file lies in the system's temporary folder (<see cref="Path.GetTempPath"/>, which follows <c>TMPDIR</c>) and is
/// removed from the folder as soon as it is opened, so nothing is left behind even when the build is killed; the space it
/// takes is freed when the spill is disposed or the process ends. Where no scratch file can be made or written (a read-only
/// or full temporary folder), images are simply kept in memory: the build's results do not depend on which.
/// Thread-safe.
/// </remarks>
public sealed class ImageSpill : IDisposable
{
    private readonly SafeFileHandle? _file;
    private long _end;
    private volatile bool _broken;

    private ImageSpill(SafeFileHandle? file) => _file = file;

    /// <summary>A spill backed by a new scratch file, or one that keeps images in memory when no file can be made.</summary>
    public static ImageSpill Create()
    {
        try
        {
            string path = Path.Combine(Path.GetTempPath(), $"stackbuild-spill-{Environment.ProcessId}-{Guid.NewGuid():N}.tmp");
            var file = File.OpenHandle(path, FileMode.CreateNew, FileAccess.ReadWrite, FileShare.Delete, FileOptions.DeleteOnClose);
            try { File.Delete(path); } catch (IOException) { } catch (UnauthorizedAccessException) { } // removed at close instead
            return new ImageSpill(file);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            return InMemory();
        }
    }

    /// <summary>A spill writing into the file at <paramref name="path"/> (which it does not remove; for tests, e.g. /dev/full).</summary>
    internal static ImageSpill Over(string path) => new(File.OpenHandle(path, FileMode.Open, FileAccess.ReadWrite));

    /// <summary>A spill that keeps every image in memory (for small jobs and tests).</summary>
    public static ImageSpill InMemory() => new(null);

    /// <summary>True when images go to a scratch file.</summary>
    public bool OnDisk => _file is not null && !_broken;

    /// <summary>Bytes written to the scratch file so far.</summary>
    public long BytesWritten => Interlocked.Read(ref _end);

    /// <summary>
    /// Keeps <paramref name="image"/> (which must not change afterwards) and returns its handle. The caller may drop its own
    /// reference: the image is then held on disk only (or in memory, by the handle, when the spill keeps images there).
    /// </summary>
    public HeldImage Hold(GrayImage image)
    {
        if (!OnDisk) return new HeldImage(image);
        var bytes = MemoryMarshal.AsBytes(image.Pixels.AsSpan());
        long offset = Interlocked.Add(ref _end, bytes.Length) - bytes.Length;
        try
        {
            RandomAccess.Write(_file!, bytes, offset);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            _broken = true;   // a full disk: keep this image and every later one in memory
            return new HeldImage(image);
        }
        return new HeldImage(this, image, offset);
    }

    internal void Read(long offset, Span<byte> target)
    {
        while (!target.IsEmpty)
        {
            int n = RandomAccess.Read(_file!, target, offset);
            if (n <= 0) throw new IOException("The build's scratch file ended early; was the temporary folder cleaned while the build ran?");
            target = target[n..];
            offset += n;
        }
    }

    public void Dispose() => _file?.Dispose();
}

/// <summary>
/// An image kept by an <see cref="ImageSpill"/>: its size at hand, its pixels read back when asked for. The image last
/// read is shared while anyone still holds it (a weak reference), so asking twice in a row reads once.
/// </summary>
public sealed class HeldImage
{
    public int Width { get; }
    public int Height { get; }

    private readonly GrayImage? _image;
    private readonly ImageSpill? _spill;
    private readonly long _offset;
    private readonly WeakReference<GrayImage> _recent;

    /// <summary>An image held in memory.</summary>
    public HeldImage(GrayImage image)
    {
        (Width, Height, _image) = (image.Width, image.Height, image);
        _recent = new WeakReference<GrayImage>(image);
    }

    internal HeldImage(ImageSpill spill, GrayImage written, long offset)
    {
        (Width, Height, _spill, _offset) = (written.Width, written.Height, spill, offset);
        _recent = new WeakReference<GrayImage>(written);
    }

    /// <summary>The image (shared: do not change it).</summary>
    public GrayImage Load()
    {
        if (_image is not null) return _image;
        lock (_recent)
        {
            if (_recent.TryGetTarget(out var alive)) return alive;
            var pixels = new float[checked(Width * Height)];
            _spill!.Read(_offset, MemoryMarshal.AsBytes(pixels.AsSpan()));
            var image = new GrayImage(Width, Height, pixels);
            _recent.SetTarget(image);
            return image;
        }
    }
}
