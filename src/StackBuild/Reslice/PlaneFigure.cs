using SixLabors.ImageSharp;
using SixLabors.ImageSharp.Formats.Png;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using StackBuild.IO;

namespace StackBuild.Reslice;

/// <summary>One coloured layer over a plane: RGBA pixels of the plane's size and how opaque the layer is (0–1).</summary>
public sealed record FigureLayer(Rgba32[] Pixels, double Opacity);

/// <summary>How a figure is laid out: the plane enlarged by <see cref="Zoom"/> (whole pixels), on a dark margin.</summary>
/// <param name="Zoom">Each plane pixel becomes Zoom × Zoom figure pixels.</param>
/// <param name="Margin">Figure pixels around the plane, where the edge letters stand.</param>
/// <param name="Footer">Figure pixels below the bottom margin, for the scale bar.</param>
public sealed record FigureLayout(int Zoom, int Margin, int Footer)
{
    /// <summary>A zoom that brings the plane's long side near 600 pixels (never below 1), with room for letters and a scale bar.</summary>
    public static FigureLayout For(int width, int height) => new(Math.Max(1, (int)Math.Round(600.0 / Math.Max(width, height))), 28, 26);

    public int FigureWidth(int width) => width * Zoom + 2 * Margin;
    public int FigureHeight(int height) => height * Zoom + 2 * Margin + Footer;
}

/// <summary>
/// A resliced plane as a figure: the grey plane (windowed), coloured layers over it, the anatomical letter at each
/// edge, and a scale bar with its length. The viewer's "save plane" button and <c>stackbuild reslice --overlay</c>
/// show the same picture.
/// </summary>
public static class PlaneFigure
{
    private static readonly Rgb24 Ground = new(0x14, 0x13, 0x18), Ink = new(0xe9, 0xe5, 0xf2);

    /// <summary>
    /// Composes the figure. Layers are laid over the grey in order, each pixel mixed as
    /// grey·(1 − a) + colour·a with a = pixel alpha / 255 × layer opacity (source-over, as a browser stacks them).
    /// </summary>
    public static Image<Rgb24> Compose(GrayImage plane, IntensityWindow window, IReadOnlyList<FigureLayer> layers, ReslicePlane geometry, FigureLayout layout)
    {
        int w = plane.Width, h = plane.Height, zoom = layout.Zoom, m = layout.Margin;
        foreach (var layer in layers)
            if (layer.Pixels.Length != w * h) throw new ArgumentException("Every layer must have the plane's size.", nameof(layers));
        var mixed = Mix(plane, window, layers);
        var figure = new Image<Rgb24>(layout.FigureWidth(w), layout.FigureHeight(h), Ground);
        figure.ProcessPixelRows(rows =>
        {
            for (int y = 0; y < h * zoom; y++)
            {
                var row = rows.GetRowSpan(m + y);
                int source = (y / zoom) * w;
                for (int x = 0; x < w * zoom; x++) row[m + x] = mixed[source + x / zoom];
            }
        });
        // Edge letters, centred in the margins.
        int cx = m + w * zoom / 2, cy = m + h * zoom / 2;
        Text(figure, Letter(geometry.Down, -1), cx, m / 2);
        Text(figure, Letter(geometry.Down, 1), cx, m + h * zoom + m / 2);
        Text(figure, Letter(geometry.Right, -1), m / 2, cy);
        Text(figure, Letter(geometry.Right, 1), m + w * zoom + m / 2, cy);
        // Scale bar: a round length near a fifth of the plane's width, under its left edge.
        double mmPerPixel = geometry.PixelSizeMm / zoom;
        double mm = RoundLength(w * zoom / 5.0 * mmPerPixel);
        int bar = Math.Max(1, (int)Math.Round(mm / mmPerPixel));
        int barY = m + h * zoom + m + layout.Footer / 2 - 2;
        figure.ProcessPixelRows(rows =>
        {
            for (int y = barY; y < barY + 4; y++)
            {
                var row = rows.GetRowSpan(y);
                for (int x = m; x < Math.Min(m + bar, figure.Width); x++) row[x] = Ink;
            }
        });
        var label = LengthLabel(mm);
        Text(figure, label, m + bar + 10 + TextWidth(label) / 2, barY + 2);
        return figure;
    }

    /// <summary>Writes the figure as an 8-bit RGB PNG via <see cref="AtomicFile"/>.</summary>
    public static void WriteFile(string path, Image<Rgb24> figure) =>
        AtomicFile.Write(path, s => figure.SaveAsPng(s, new PngEncoder { ColorType = PngColorType.Rgb, BitDepth = PngBitDepth.Bit8, ChunkFilter = PngChunkFilter.ExcludeAll }));

    /// <summary>The grey plane with the layers mixed over it, one colour per plane pixel.</summary>
    public static Rgb24[] Mix(GrayImage plane, IntensityWindow window, IReadOnlyList<FigureLayer> layers)
    {
        var gray = PlanePng.ToGray8(plane, window);
        var mixed = new Rgb24[gray.Length];
        for (int p = 0; p < gray.Length; p++)
        {
            double r = gray[p], g = gray[p], b = gray[p];
            foreach (var layer in layers)
            {
                var c = layer.Pixels[p];
                double a = c.A / 255.0 * layer.Opacity;
                r = r * (1 - a) + c.R * a;
                g = g * (1 - a) + c.G * a;
                b = b * (1 - a) + c.B * a;
            }
            mixed[p] = new Rgb24((byte)Math.Round(r), (byte)Math.Round(g), (byte)Math.Round(b));
        }
        return mixed;
    }

    /// <summary>The anatomical letter (RAS+) a world direction points to most; <paramref name="sign"/> −1 for the opposite side.</summary>
    public static string Letter(Vector3D direction, int sign)
    {
        double[] v = [direction.X * sign, direction.Y * sign, direction.Z * sign];
        int best = 0;
        for (int a = 1; a < 3; a++) if (Math.Abs(v[a]) > Math.Abs(v[best])) best = a;
        return (best, v[best] >= 0) switch
        {
            (0, true) => "R", (0, false) => "L", (1, true) => "A", (1, false) => "P", (2, true) => "S", _ => "I",
        };
    }

    /// <summary>The largest of 1, 2 or 5 times a power of ten that is not longer than <paramref name="target"/> mm.</summary>
    public static double RoundLength(double target)
    {
        double power = Math.Pow(10, Math.Floor(Math.Log10(target)));
        foreach (double f in new[] { 5.0, 2.0, 1.0 })
            if (f * power <= target * (1 + 1e-9)) return f * power;
        return power;
    }

    public static string LengthLabel(double mm) =>
        mm >= 1 ? FormattableString.Invariant($"{mm:0.###} mm") : FormattableString.Invariant($"{mm * 1000:0.###} µm");

    // ---- a small bitmap font for the letters and the scale bar's length (5 × 7 cells, drawn at 2×) ----

    private const int Scale = 2, GlyphWidth = 5, GlyphHeight = 7, Spacing = 1;

    private static readonly Dictionary<char, string[]> Glyphs = new()
    {
        ['R'] = ["####.", "#...#", "#...#", "####.", "#.#..", "#..#.", "#...#"],
        ['L'] = ["#....", "#....", "#....", "#....", "#....", "#....", "#####"],
        ['A'] = [".###.", "#...#", "#...#", "#####", "#...#", "#...#", "#...#"],
        ['P'] = ["####.", "#...#", "#...#", "####.", "#....", "#....", "#...."],
        ['S'] = [".####", "#....", "#....", ".###.", "....#", "....#", "####."],
        ['I'] = ["#####", "..#..", "..#..", "..#..", "..#..", "..#..", "#####"],
        ['m'] = [".....", ".....", "##.#.", "#.#.#", "#.#.#", "#.#.#", "#.#.#"],
        ['µ'] = [".....", "#...#", "#...#", "#...#", "#..##", "###.#", "#...."],
        ['.'] = [".....", ".....", ".....", ".....", ".....", ".##..", ".##.."],
        [' '] = [".....", ".....", ".....", ".....", ".....", ".....", "....."],
        ['0'] = [".###.", "#...#", "#..##", "#.#.#", "##..#", "#...#", ".###."],
        ['1'] = ["..#..", ".##..", "..#..", "..#..", "..#..", "..#..", ".###."],
        ['2'] = [".###.", "#...#", "....#", "...#.", "..#..", ".#...", "#####"],
        ['3'] = ["####.", "....#", "....#", ".###.", "....#", "....#", "####."],
        ['4'] = ["...#.", "..##.", ".#.#.", "#..#.", "#####", "...#.", "...#."],
        ['5'] = ["#####", "#....", "####.", "....#", "....#", "#...#", ".###."],
        ['6'] = [".###.", "#....", "#....", "####.", "#...#", "#...#", ".###."],
        ['7'] = ["#####", "....#", "...#.", "..#..", ".#...", ".#...", ".#..."],
        ['8'] = [".###.", "#...#", "#...#", ".###.", "#...#", "#...#", ".###."],
        ['9'] = [".###.", "#...#", "#...#", ".####", "....#", "....#", ".###."],
    };

    private static int TextWidth(string text) => text.Length * (GlyphWidth + Spacing) * Scale - Spacing * Scale;

    /// <summary>Draws <paramref name="text"/> centred on (cx, cy); characters without a glyph are left blank.</summary>
    private static void Text(Image<Rgb24> image, string text, int cx, int cy)
    {
        int x0 = cx - TextWidth(text) / 2, y0 = cy - GlyphHeight * Scale / 2;
        image.ProcessPixelRows(rows =>
        {
            for (int n = 0; n < text.Length; n++)
            {
                if (!Glyphs.TryGetValue(text[n], out var glyph)) continue;
                int gx = x0 + n * (GlyphWidth + Spacing) * Scale;
                for (int r = 0; r < GlyphHeight; r++)
                for (int c = 0; c < GlyphWidth; c++)
                {
                    if (glyph[r][c] != '#') continue;
                    for (int dy = 0; dy < Scale; dy++)
                    {
                        int y = y0 + r * Scale + dy;
                        if (y < 0 || y >= image.Height) continue;
                        var row = rows.GetRowSpan(y);
                        for (int dx = 0; dx < Scale; dx++)
                        {
                            int x = gx + c * Scale + dx;
                            if (x >= 0 && x < image.Width) row[x] = Ink;
                        }
                    }
                }
            }
        });
    }
}
