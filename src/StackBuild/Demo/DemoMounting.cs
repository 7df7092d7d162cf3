using StackBuild.Geometry;
using StackBuild.Imaging;

namespace StackBuild.Demo;

/// <summary>
/// What happens to a section between the knife and the scanner: damage (a tear, or a fold and a bubble),
/// a random rigid placement on the slide (possibly face down), and a brightfield scan with its own gain,
/// offset and noise. All work happens in truth-plane pixel coordinates on whole planes.
/// </summary>
internal static class DemoMounting
{
    private const float TissueThreshold = 0.003f;

    /// <summary>
    /// A tear: a jagged crack cuts off a cap of the section, and that flap is turned open a few degrees about
    /// a hinge beyond the tissue and pushed a little outwards; a piece is also bitten out of the edge
    /// on the far side.
    /// </summary>
    public static GrayImage Tear(GrayImage plane, DemoRandom rng, ulong noiseSeed)
    {
        int w = plane.Width, h = plane.Height;
        double unit = w / 256.0;
        var (cx, cy) = Centroid(plane);
        double angle = rng.Uniform(0, 2 * Math.PI);
        double nx = Math.Cos(angle), ny = Math.Sin(angle);
        var (_, reach) = Extent(plane, cx, cy, nx, ny);
        double offset = 0.55 * reach;
        double jag = 1.5 * unit, jagCell = 4 * unit;
        double Side(double x, double y)
        {
            double along = -(x - cx) * ny + (y - cy) * nx;
            return (x - cx) * nx + (y - cy) * ny - offset + jag * LatticeNoise.Line(noiseSeed, along / jagCell);
        }

        // Hinge just beyond one end of the chord, so the crack opens as a wedge.
        var (_, alongHigh) = Extent(plane, cx, cy, -ny, nx);
        double hingeAlong = alongHigh + 2;
        double hx = cx + offset * nx - hingeAlong * ny, hy = cy + offset * ny + hingeAlong * nx;
        double turn = rng.Uniform(4, 8);
        double midX = cx + offset * nx, midY = cy + offset * ny;
        var trial = Transform2D.Rotation(turn, hx, hy).Apply(midX, midY);
        if ((trial.X - midX) * nx + (trial.Y - midY) * ny < 0) turn = -turn;
        var flap = Transform2D.Rotation(turn, hx, hy).Then(Transform2D.Translation(1.5 * unit * nx, 1.5 * unit * ny));
        var back = flap.Inverse();

        // The bite: a ragged disc centred on the outline opposite the flap, give or take 60°.
        double biteAngle = angle + Math.PI + rng.Uniform(-Math.PI / 3, Math.PI / 3);
        double bx = Math.Cos(biteAngle), by = Math.Sin(biteAngle);
        var (_, biteReach) = Extent(plane, cx, cy, bx, by);
        double biteX = cx + biteReach * bx, biteY = cy + biteReach * by, biteRadius = 0.045 * w;

        var torn = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            var (qx, qy) = back.Apply(x, y);
            float value;
            if (Side(qx, qy) > 0) value = plane.SampleBilinear(qx, qy);
            else if (Side(x, y) <= 0) value = plane[x, y];
            else value = 0;
            double bite = Math.Sqrt((x - biteX) * (x - biteX) + (y - biteY) * (y - biteY));
            double biteEdge = biteRadius * (1 + 0.25 * LatticeNoise.Line(noiseSeed + 1, Math.Atan2(y - biteY, x - biteX) * 3));
            if (bite < biteEdge) value = 0;
            torn[x, y] = value;
        }
        return torn;
    }

    /// <summary>
    /// A fold and a bubble: a cap of the section is folded back over the rest (double thickness stains darker,
    /// and the cap's own place is bare), and an air bubble under the coverslip leaves a dark ring.
    /// </summary>
    public static GrayImage FoldAndBubble(GrayImage plane, DemoRandom rng)
    {
        int w = plane.Width, h = plane.Height;
        var (cx, cy) = Centroid(plane);
        double angle = rng.Uniform(0, 2 * Math.PI);
        double nx = Math.Cos(angle), ny = Math.Sin(angle);
        var (_, reach) = Extent(plane, cx, cy, nx, ny);
        double offset = 0.5 * reach;
        double bubbleAngle = rng.Uniform(0, 2 * Math.PI), bubbleDistance = rng.Uniform(0.1, 0.45) * reach;
        double bubbleX = cx + bubbleDistance * Math.Cos(bubbleAngle), bubbleY = cy + bubbleDistance * Math.Sin(bubbleAngle);
        double bubbleRadius = rng.Uniform(0.05, 0.075) * w, ring = Math.Max(1.2, 1.5 * w / 256.0);

        var folded = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
        {
            double side = (x - cx) * nx + (y - cy) * ny - offset;
            // The folded cap lies mirrored across the fold line, on top of the rest: two layers absorb more.
            double rx = x - 2 * side * nx, ry = y - 2 * side * ny;
            double under = plane[x, y], over = plane.SampleBilinear(rx, ry);
            float value = (float)(Math.Clamp(0.5 - side, 0, 1) * Math.Min(DemoPhantom.MaxTissueDensity, under + 0.8 * over * (1 - under)));
            double r = Math.Sqrt((x - bubbleX) * (x - bubbleX) + (y - bubbleY) * (y - bubbleY));
            if (r < bubbleRadius) value *= 0.85f;
            double ringWeight = Math.Clamp(ring - Math.Abs(r - bubbleRadius) + 0.5, 0, 1);
            value = (float)Math.Max(value, 0.7 * ringWeight);
            folded[x, y] = value;
        }
        return folded;
    }

    /// <summary>
    /// A random placement on the slide: turned by any angle about the canvas centre (after a mirror about the
    /// vertical centre line when face down) and shifted by up to 15 % of the canvas, as far as the tissue
    /// stays at least a small margin inside the canvas.
    /// </summary>
    public static Transform2D Placement(GrayImage plane, bool mirrored, DemoRandom rng)
    {
        int w = plane.Width, h = plane.Height;
        double cx = (w - 1) / 2.0, cy = (h - 1) / 2.0;
        double angle = rng.Uniform(0, 360);
        var turn = Transform2D.Translation(-cx, -cy)
            .Then(mirrored ? Transform2D.MirrorX() : Transform2D.Identity)
            .Then(Transform2D.Rotation(angle))
            .Then(Transform2D.Translation(cx, cy));
        double minX = double.MaxValue, maxX = double.MinValue, minY = double.MaxValue, maxY = double.MinValue;
        for (int y = 0; y < h; y++)
        {
            var row = plane.Row(y);
            for (int x = 0; x < w; x++)
            {
                if (row[x] <= TissueThreshold) continue;
                var (px, py) = turn.Apply(x, y);
                minX = Math.Min(minX, px); maxX = Math.Max(maxX, px);
                minY = Math.Min(minY, py); maxY = Math.Max(maxY, py);
            }
        }
        if (minX > maxX) return turn; // no tissue at all
        double margin = Math.Max(2, 0.02 * w);
        double sx = Shift(rng, margin - minX, w - 1 - margin - maxX, 0.15 * w);
        double sy = Shift(rng, margin - minY, h - 1 - margin - maxY, 0.15 * h);
        return turn.Then(Transform2D.Translation(sx, sy));
    }

    private static double Shift(DemoRandom rng, double low, double high, double limit)
    {
        if (low > high) return (low + high) / 2; // cannot fit: centre it
        double a = Math.Max(low, -limit), b = Math.Min(high, limit);
        return a <= b ? rng.Uniform(a, b) : Math.Clamp(0, low, high);
    }

    /// <summary>
    /// The brightfield scan: <c>255 · (offset − gain · density)</c> sampled through the inverse placement, plus
    /// Gaussian noise of <paramref name="noiseSd"/> gray levels, rounded to 0–255.
    /// </summary>
    public static GrayImage Scan(GrayImage plane, Transform2D planeToImage, double gain, double offset, double noiseSd, DemoRandom rng)
    {
        int w = plane.Width, h = plane.Height;
        var imageToPlane = planeToImage.Inverse();
        var image = new GrayImage(w, h);
        for (int y = 0; y < h; y++)
        {
            var row = image.Row(y);
            for (int x = 0; x < w; x++)
            {
                var (qx, qy) = imageToPlane.Apply(x, y);
                double clean = 255 * (offset - gain * plane.SampleBilinear(qx, qy));
                row[x] = (float)Math.Clamp(Math.Round(clean + noiseSd * rng.NextGaussian()), 0, 255);
            }
        }
        return image;
    }

    private static (double X, double Y) Centroid(GrayImage plane)
    {
        double sum = 0, sx = 0, sy = 0;
        for (int y = 0; y < plane.Height; y++)
        {
            var row = plane.Row(y);
            for (int x = 0; x < plane.Width; x++)
            {
                if (row[x] <= TissueThreshold) continue;
                sum += 1; sx += x; sy += y;
            }
        }
        return sum > 0 ? (sx / sum, sy / sum) : ((plane.Width - 1) / 2.0, (plane.Height - 1) / 2.0);
    }

    /// <summary>Lowest and highest projection of tissue pixels on the direction (dx, dy), from (cx, cy).</summary>
    private static (double Low, double High) Extent(GrayImage plane, double cx, double cy, double dx, double dy)
    {
        double low = 0, high = 0;
        for (int y = 0; y < plane.Height; y++)
        {
            var row = plane.Row(y);
            for (int x = 0; x < plane.Width; x++)
            {
                if (row[x] <= TissueThreshold) continue;
                double p = (x - cx) * dx + (y - cy) * dy;
                low = Math.Min(low, p); high = Math.Max(high, p);
            }
        }
        return (low, high);
    }
}
