namespace StackBuild.Imaging;

/// <summary>
/// A single-channel image of 32-bit floats, row-major, x to the right and y down, (0, 0) at the centre of the
/// top-left pixel. Registration and rendering work on this type.
/// </summary>
public sealed class GrayImage
{
    public int Width { get; }
    public int Height { get; }
    public float[] Pixels { get; }

    public GrayImage(int width, int height, float[]? pixels = null)
    {
        if (width <= 0 || height <= 0) throw new ArgumentOutOfRangeException(nameof(width), "An image needs a positive width and height.");
        Width = width;
        Height = height;
        Pixels = pixels ?? new float[checked(width * height)];
        if (Pixels.Length != width * height) throw new ArgumentException("Pixel count does not match width × height.");
    }

    public float this[int x, int y]
    {
        get => Pixels[y * Width + x];
        set => Pixels[y * Width + x] = value;
    }

    public Span<float> Row(int y) => Pixels.AsSpan(y * Width, Width);

    public GrayImage Clone() => new(Width, Height, (float[])Pixels.Clone());

    /// <summary>A copy of the <paramref name="width"/> × <paramref name="height"/> block whose top-left pixel is (<paramref name="x"/>, <paramref name="y"/>); the block must lie inside the image.</summary>
    public GrayImage Crop(int x, int y, int width, int height)
    {
        if (x < 0 || y < 0 || width <= 0 || height <= 0 || x + width > Width || y + height > Height)
            throw new ArgumentOutOfRangeException(nameof(x), "The block must lie inside the image.");
        var crop = new GrayImage(width, height);
        for (int r = 0; r < height; r++) Row(y + r).Slice(x, width).CopyTo(crop.Row(r));
        return crop;
    }

    /// <summary>
    /// The median of the outermost band of pixels, <paramref name="band"/> wide (each pixel counted once; the upper of
    /// the two middle values for an even count): the slide's background level.
    /// </summary>
    public float BorderMedian(int band = 1)
    {
        band = Math.Clamp(band, 1, Math.Max(1, Math.Min(Width, Height)));
        var border = new List<float>(2 * band * (Width + Height));
        for (int y = 0; y < Height; y++)
        {
            bool edgeRow = y < band || y >= Height - band;
            for (int x = 0; x < Width; x++)
                if (edgeRow || x < band || x >= Width - band) border.Add(Pixels[y * Width + x]);
        }
        border.Sort();
        return border[border.Count / 2];
    }

    /// <summary>Bilinear sample at (x, y) in pixel coordinates; <paramref name="outside"/> beyond the edge (<see cref="Bilinear.Sample"/>).</summary>
    public float SampleBilinear(double x, double y, float outside = 0f) => Bilinear.Sample(this, x, y, outside);
}
