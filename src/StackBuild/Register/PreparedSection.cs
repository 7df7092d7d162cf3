using MathNet.Numerics;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Numerics;

namespace StackBuild.Register;

/// <summary>
/// One section made ready for registration: reduced to the working size, tissue bright on dark, normalised to
/// [0, 1], with its tissue mask and Fourier data. Made once per section by
/// <see cref="SectionRegistration.Prepare"/> and reused for every pair the section takes part in; immutable once
/// prepared (<see cref="Finer"/> is set during preparation, before any pair sees it), so it can be shared between threads.
/// </summary>
public sealed class PreparedSection
{
    public int FullWidth { get; }
    public int FullHeight { get; }
    /// <summary>Working pixels per full-resolution pixel (≤ 1).</summary>
    public double Scale { get; }
    /// <summary>
    /// The preprocessed working image: tissue bright on dark, values in [0, 1]. A section prepared from an image the build
    /// holds anyway (<see cref="SectionRegistration.PrepareUnreduced"/>) keeps only that image and the map of its values, and
    /// makes this anew, the same to the bit, each time it is asked for (a new array each time: keep it while using it); the
    /// build then holds one working-size image a section instead of two.
    /// </summary>
    public GrayImage WorkImage => _work ?? Derive();
    /// <summary>Width of <see cref="WorkImage"/>.</summary>
    public int WorkWidth { get; }
    /// <summary>Height of <see cref="WorkImage"/>.</summary>
    public int WorkHeight { get; }
    /// <summary>True when the scan had a bright background and was inverted.</summary>
    public bool Inverted { get; }
    /// <summary>
    /// The tissue (smoothed Otsu), row-major over <see cref="WorkImage"/>: a new array each time it is asked for, from a
    /// copy packed eight pixels to the byte (a build holds one for every section).
    /// </summary>
    public bool[] TissueMask
    {
        get
        {
            var mask = new bool[_mask.Length];
            _mask.CopyTo(mask, 0);
            return mask;
        }
    }
    /// <summary>Share of the working image that is tissue (0 for an empty or flat scan).</summary>
    public double TissueFraction { get; }
    /// <summary>Full-resolution pixel coordinates to working-image pixel coordinates.</summary>
    public Transform2D FullToWork => Preprocessing.ScaleMap(Scale);

    /// <summary>
    /// The section on its registration canvas: made when first asked for and kept, or, when the section was prepared with
    /// a <see cref="CanvasCache"/>, kept only while it is among that cache's most recently used (a build holds a few
    /// sections' canvases, not every section's; one asked for again later is made again, the same).
    /// </summary>
    internal SectionCanvas Canvas => _cache is null ? _own.Value : _cache.Get(this);
    internal bool UsesForegroundMask { get; }
    internal int CanvasSize { get; }

    /// <summary>
    /// The same section at a finer pixel (its <see cref="FullWidth"/> × <see cref="FullHeight"/> coordinates are this
    /// section's, its <see cref="Scale"/> above 1), made only where the tissue is small at this size (a specimen's end
    /// sections); a pair of two sections that both have one is registered on those (see <see cref="SectionRegistration.Register"/>).
    /// </summary>
    public PreparedSection? Finer { get; internal set; }

    private readonly CanvasCache? _cache;
    private readonly Lazy<SectionCanvas> _own;
    private readonly GrayImage? _work;
    /// <summary>Without <see cref="_work"/>: the image it is made from, and the map of its values (after the inversion).</summary>
    private readonly HeldImage? _source;
    private readonly float _lo, _range;
    private readonly System.Collections.BitArray _mask;

    internal PreparedSection(int fullWidth, int fullHeight, double scale, GrayImage work, bool inverted, bool useForegroundMask, CanvasCache? cache = null)
        : this(fullWidth, fullHeight, scale, work, inverted, useForegroundMask, cache, null, 0, 0) { }

    /// <summary>
    /// A section whose working image is <paramref name="source"/> (read back when needed; inverted when <paramref name="inverted"/>) under
    /// <see cref="Preprocessing.Normalised"/>(·, <paramref name="lo"/>, <paramref name="range"/>); <paramref name="work"/> is
    /// that image, made once here for the tissue mask and not kept.
    /// </summary>
    internal static PreparedSection Derived(int fullWidth, int fullHeight, HeldImage source, GrayImage work, float lo, float range, bool inverted,
        bool useForegroundMask, CanvasCache? cache) =>
        new(fullWidth, fullHeight, 1.0, work, inverted, useForegroundMask, cache, source, lo, range);

    private PreparedSection(int fullWidth, int fullHeight, double scale, GrayImage work, bool inverted, bool useForegroundMask, CanvasCache? cache,
        HeldImage? source, float lo, float range)
    {
        FullWidth = fullWidth;
        FullHeight = fullHeight;
        Scale = scale;
        _work = source is null ? work : null;
        (_source, _lo, _range) = (source, lo, range);
        WorkWidth = work.Width;
        WorkHeight = work.Height;
        Inverted = inverted;
        UsesForegroundMask = useForegroundMask;
        var mask = Preprocessing.TissueMask(work.Pixels, work.Width, work.Height);
        _mask = new System.Collections.BitArray(mask);
        TissueFraction = mask.Count(t => t) / (double)mask.Length;
        CanvasSize = Fft2D.PaddedSize(Math.Max(work.Width, work.Height));
        _cache = cache;
        _own = new Lazy<SectionCanvas>(() => new SectionCanvas(this, CanvasSize));
    }

    private GrayImage Derive()
    {
        var image = _source!.Load();
        var source = image.Pixels;
        var pixels = new float[source.Length];
        float lo = _lo, range = _range;
        if (Inverted) for (int i = 0; i < pixels.Length; i++) pixels[i] = Preprocessing.Normalised(-source[i], lo, range);
        else for (int i = 0; i < pixels.Length; i++) pixels[i] = Preprocessing.Normalised(source[i], lo, range);
        return new GrayImage(image.Width, image.Height, pixels);
    }

    /// <summary>The same section at a smaller working scale (for pairing with a section prepared at that scale).</summary>
    internal PreparedSection AtScale(double scale)
    {
        var work = ImageOps.Reduce(WorkImage, scale / Scale,
            Math.Max(1, (int)Math.Round(FullWidth * scale)), Math.Max(1, (int)Math.Round(FullHeight * scale)));
        return new PreparedSection(FullWidth, FullHeight, scale, work, Inverted, UsesForegroundMask);
    }
}

/// <summary>
/// The registration canvases of the sections most recently used, at most <see cref="Capacity"/> of them (least recently
/// used dropped first). A canvas is about a dozen working images' worth of memory (image, mask, signal, spectrum, the
/// half-size level), so a build that kept every section's would hold far more than its output volume; pairs are
/// registered in series order, between sections a few apart, so a small cache makes almost every canvas once.
/// Thread-safe; two threads asking for the same missing canvas wait for one making of it.
/// </summary>
public sealed class CanvasCache(int capacity)
{
    public int Capacity { get; } = Math.Max(2, capacity);

    private readonly object _gate = new();
    private readonly LinkedList<(PreparedSection Section, Lazy<SectionCanvas> Canvas)> _recent = new();

    /// <summary>How many canvases were made (for tests and the stage breakdown).</summary>
    public int Made => _made;
    private int _made;

    internal SectionCanvas Get(PreparedSection section)
    {
        Lazy<SectionCanvas> canvas;
        lock (_gate)
        {
            var node = _recent.First;
            while (node is not null && !ReferenceEquals(node.Value.Section, section)) node = node.Next;
            if (node is not null) _recent.Remove(node);
            else node = new LinkedListNode<(PreparedSection, Lazy<SectionCanvas>)>((section, new Lazy<SectionCanvas>(() =>
            {
                Interlocked.Increment(ref _made);
                return new SectionCanvas(section, section.CanvasSize);
            })));
            _recent.AddFirst(node);
            while (_recent.Count > Capacity) _recent.RemoveLast();
            canvas = node.Value.Canvas;
        }
        return canvas.Value;
    }
}

/// <summary>
/// A section laid on a square n×n canvas (n a fast FFT size) with its tissue centroid at the canvas centre,
/// so rotations about the canvas centre turn the tissue about itself and need little translation.
/// </summary>
internal sealed class SectionCanvas
{
    public int Size { get; }
    /// <summary>Canvas centre, (n − 1)/2 in both axes.</summary>
    public double Centre => (Size - 1) / 2.0;
    /// <summary>Full-resolution pixel coordinates to canvas coordinates.</summary>
    public Transform2D FullToCanvas { get; }
    /// <summary>Working image on the canvas (0 outside it).</summary>
    public float[] Image { get; }
    /// <summary>Feathered tissue mask on the canvas.</summary>
    public float[] SoftMask { get; }
    /// <summary>What phase correlation sees before the window: the image, times the soft mask when asked.</summary>
    public float[] Signal { get; }
    /// <summary>Bounding box (inclusive) of the canvas pixels where <see cref="Signal"/> is not zero; (n, n, −1, −1) when there are none.</summary>
    public (int X0, int Y0, int X1, int Y1) SignalBox { get; }
    /// <summary>Unshifted 2D spectrum of the windowed, mean-removed <see cref="Signal"/>.</summary>
    public Complex32[] Spectrum { get; }
    /// <summary>The log-polar magnitude spectrum (for rotation candidates); not made for a <see cref="Half"/>.</summary>
    public PolarSpectrum Polar { get; }
    public float[] Window { get; }
    /// <summary>Bounding box (inclusive) of the canvas pixels whose soft mask is above 0.5; (n, n, −1, −1) when there are none.</summary>
    public (int X0, int Y0, int X1, int Y1) MaskBox { get; }
    /// <summary>Largest distance of such a pixel from the canvas centre (0 when there are none).</summary>
    public double TissueRadius { get; }

    /// <summary>
    /// The same canvas at half the size (2×2 area averages; canvas pixel i of it covers pixels 2i and 2i + 1 here, so the
    /// centres correspond), where hypotheses are searched before they are polished here; null when the size is odd or
    /// under <see cref="MinHalfSize"/>. It has no <see cref="Polar"/> spectrum and no half of its own.
    /// </summary>
    public SectionCanvas? Half { get; }

    /// <summary>Smallest canvas size that gets a <see cref="Half"/>.</summary>
    public const int MinHalfSize = 128;

    public SectionCanvas(PreparedSection section, int size)
    {
        Size = size;
        var work = section.WorkImage;
        var (cx, cy) = Centroid(section.TissueMask, work.Width, work.Height);
        int ox = (int)Math.Round(Centre - cx), oy = (int)Math.Round(Centre - cy);
        FullToCanvas = section.FullToWork.Then(Transform2D.Translation(ox, oy));
        var soft = Preprocessing.Feather(section.TissueMask, work.Width, work.Height);
        Image = Place(work.Pixels, work.Width, work.Height, ox, oy, size);
        SoftMask = Place(soft, work.Width, work.Height, ox, oy, size);
        (MaskBox, TissueRadius) = Extent(SoftMask, size, Centre);
        Signal = section.UsesForegroundMask ? Image.Select((v, i) => v * SoftMask[i]).ToArray() : Image;
        SignalBox = NonZeroBox(Signal, size);
        Window = RadialWindow(size);
        Spectrum = WindowedSpectrum(Signal, Window, size);
        Polar = PolarSpectrum.FromSpectrum(Spectrum, size);
        if (size % 2 == 0 && size >= MinHalfSize)
        {
            int h = size / 2;
            var halfImage = HalveArea(Image, size);
            var halfMask = HalveArea(SoftMask, size);
            Half = new SectionCanvas(h, FullToCanvas.Then(ToHalf), halfImage, halfMask,
                section.UsesForegroundMask ? HalveArea(Signal, size) : halfImage);
        }
    }

    private SectionCanvas(int size, Transform2D fullToCanvas, float[] image, float[] softMask, float[] signal)
    {
        Size = size;
        FullToCanvas = fullToCanvas;
        Image = image;
        SoftMask = softMask;
        (MaskBox, TissueRadius) = Extent(SoftMask, size, Centre);
        Signal = signal;
        SignalBox = NonZeroBox(Signal, size);
        Window = RadialWindow(size);
        Spectrum = WindowedSpectrum(Signal, Window, size);
        Polar = null!;
    }

    /// <summary>Coordinates on this canvas → coordinates on <see cref="Half"/>: x ↦ (x − ½)/2.</summary>
    public static Transform2D ToHalf => new(0.5, 0, -0.25, 0, 0.5, -0.25);

    private static Complex32[] WindowedSpectrum(float[] signal, float[] window, int size)
    {
        var fft = Fft2D.Create(size, size);
        var spectrum = ComplexImagePool.Rent(size, size);   // LoadWindowed writes every element
        LoadWindowed(signal, window, spectrum);
        fft.Forward(spectrum);
        var result = spectrum.Span.ToArray();
        ComplexImagePool.Return(spectrum);
        return result;
    }

    /// <summary>2×2 block means of an n×n image (n even).</summary>
    private static float[] HalveArea(float[] source, int n)
    {
        int h = n / 2;
        var half = new float[h * h];
        for (int y = 0; y < h; y++)
        {
            int r0 = 2 * y * n, r1 = r0 + n;
            for (int x = 0; x < h; x++)
                half[y * h + x] = 0.25f * (source[r0 + 2 * x] + source[r0 + 2 * x + 1] + source[r1 + 2 * x] + source[r1 + 2 * x + 1]);
        }
        return half;
    }

    /// <summary>Writes (signal − mean)·window into the real parts of <paramref name="target"/>.</summary>
    public static void LoadWindowed(ReadOnlySpan<float> signal, ReadOnlySpan<float> window, ComplexImage target)
    {
        double sum = 0;
        foreach (var v in signal) sum += v;
        float mean = (float)(sum / signal.Length);
        var t = target.Span;
        for (int i = 0; i < t.Length; i++) t[i] = new Complex32((signal[i] - mean) * window[i], 0);
    }

    /// <summary>
    /// A radially symmetric Tukey window (flat to 75 % of the half-size, cosine taper to 0 at the inscribed
    /// circle): unlike a separable one it does not change when the content turns, which the rotation estimate relies on.
    /// </summary>
    private static float[] RadialWindow(int n) => Windows.GetOrAdd(n, MakeRadialWindow);

    /// <summary>One window per canvas size, shared by every canvas of that size (read only).</summary>
    private static readonly System.Collections.Concurrent.ConcurrentDictionary<int, float[]> Windows = new();

    private static float[] MakeRadialWindow(int n)
    {
        var w = new float[n * n];
        double c = (n - 1) / 2.0, radius = n / 2.0;
        for (int y = 0; y < n; y++)
        for (int x = 0; x < n; x++)
        {
            double r = Math.Sqrt((x - c) * (x - c) + (y - c) * (y - c)) / radius;
            w[y * n + x] = (float)PhaseCorrelation.TukeyTaper(1 - r, 0.25);
        }
        return w;
    }

    private static ((int, int, int, int) Box, double Radius) Extent(float[] mask, int n, double centre)
    {
        int x0 = n, y0 = n, x1 = -1, y1 = -1;
        double r2 = 0;
        for (int y = 0; y < n; y++)
        for (int x = 0; x < n; x++)
        {
            if (mask[y * n + x] <= 0.5f) continue;
            x0 = Math.Min(x0, x); x1 = Math.Max(x1, x); y0 = Math.Min(y0, y); y1 = Math.Max(y1, y);
            r2 = Math.Max(r2, (x - centre) * (x - centre) + (y - centre) * (y - centre));
        }
        return ((x0, y0, x1, y1), Math.Sqrt(r2));
    }

    private static (int, int, int, int) NonZeroBox(float[] values, int n)
    {
        int x0 = n, y0 = n, x1 = -1, y1 = -1;
        for (int y = 0; y < n; y++)
        for (int x = 0; x < n; x++)
        {
            if (values[y * n + x] == 0) continue;
            x0 = Math.Min(x0, x); x1 = Math.Max(x1, x); y0 = Math.Min(y0, y); y1 = Math.Max(y1, y);
        }
        return (x0, y0, x1, y1);
    }

    private static (double X, double Y) Centroid(bool[] mask, int w, int h)
    {
        double sx = 0, sy = 0;
        long count = 0;
        for (int y = 0; y < h; y++) for (int x = 0; x < w; x++) if (mask[y * w + x]) { sx += x; sy += y; count++; }
        return count == 0 ? ((w - 1) / 2.0, (h - 1) / 2.0) : (sx / count, sy / count);
    }

    private static float[] Place(float[] source, int w, int h, int ox, int oy, int n)
    {
        var canvas = new float[n * n];
        for (int y = 0; y < h; y++)
        {
            int cy = y + oy;
            if ((uint)cy >= (uint)n) continue;
            for (int x = 0; x < w; x++)
            {
                int cx = x + ox;
                if ((uint)cx < (uint)n) canvas[cy * n + cx] = source[y * w + x];
            }
        }
        return canvas;
    }
}
