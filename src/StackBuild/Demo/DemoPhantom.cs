using System.Buffers;

namespace StackBuild.Demo;

/// <summary>
/// The procedural tissue block behind the demo: a roughly bilateral body with a smooth irregular outline and a
/// midline cleft from the top, a layered cortex-like rim that follows the outline and the cleft, a pale inner
/// zone with a darker core, a pair of deep nuclei, a pale midline canal, a vessel (dark wall, pale lumen) that
/// curves through the whole block, a small dark nodule on the left only, and a marking track on the right only
/// (ink painted on the block's right side plus two inked needle tracks), with fine texture.
/// Values are stain density in [0, 1]: 0 is no tissue, 1 is ink. Everything is defined relative to the canvas
/// and to t = k / (Sections − 1), so the specimen looks the same at any size and section count.
/// </summary>
internal sealed class DemoPhantom
{
    /// <summary>Density of the marking ink; other tissue stays at or below <see cref="MaxTissueDensity"/>.</summary>
    public const float InkDensity = 0.99f;
    public const float MaxTissueDensity = 0.93f;

    private const int OutlineTerms = 6;

    private readonly int _w, _h, _n;
    private readonly double _unit; // pixel-sized features scale with the canvas (1 at 256 px)
    private readonly double _px, _spacing;
    private readonly ulong _seedOutline, _seedDrift, _seedRough, _seedWobble, _seedFine, _seedCoarse, _seedSlow, _seedCells;
    private readonly double _tubeFreqU, _tubeFreqV, _tubePhaseU, _tubePhaseV;
    private readonly double _noduleT, _noduleExtentT;

    public DemoPhantom(DemoOptions options)
    {
        _w = options.Width;
        _h = options.Height;
        _n = options.Sections;
        _unit = _w / 256.0;
        _px = options.PixelSizeUm;
        _spacing = options.SpacingUm;
        int seed = options.Seed;
        _seedOutline = DemoRandom.Key(seed, 101);
        _seedDrift = DemoRandom.Key(seed, 102);
        _seedRough = DemoRandom.Key(seed, 103);
        _seedWobble = DemoRandom.Key(seed, 104);
        _seedFine = DemoRandom.Key(seed, 105);
        _seedCoarse = DemoRandom.Key(seed, 106);
        _seedSlow = DemoRandom.Key(seed, 107);
        _seedCells = DemoRandom.Key(seed, 108);
        var rng = new DemoRandom(seed, 100);
        _tubeFreqU = rng.Uniform(0.5, 0.8);
        _tubeFreqV = rng.Uniform(0.4, 0.7);
        _tubePhaseU = rng.Uniform(0, 2 * Math.PI);
        _tubePhaseV = rng.Uniform(0, 2 * Math.PI);
        _noduleT = rng.Uniform(0.3, 0.45);
        _noduleExtentT = Math.Max(0.08, 1.6 / Math.Max(1, _n - 1));
    }

    public double TubeOuterRadiusPx => 4.4 * _unit;
    public double TubeLumenRadiusPx => 1.1 * _unit;

    private double T(double k) => _n > 1 ? k / (_n - 1.0) : 0.5;

    /// <summary>Where the body sits in plane k: centre, semi-axes (px) and outline harmonics.</summary>
    private readonly record struct Body(double Cx, double Cy, double A, double B, double[] Cos, double[] Sin)
    {
        /// <summary>Outline radius (1 = the plain ellipse) in the direction with the given cos/sin of the angle from "up".</summary>
        public double Radius(double cosPhi, double sinPhi)
        {
            double r = 1, cPrev = 1, c = cosPhi, sPrev = 0, s = sinPhi;
            for (int m = 1; m <= OutlineTerms; m++)
            {
                r += Cos[m] * c + Sin[m] * s;
                double cNext = 2 * cosPhi * c - cPrev, sNext = 2 * cosPhi * s - sPrev;
                cPrev = c; c = cNext; sPrev = s; s = sNext;
            }
            return r;
        }
    }

    private Body BodyAt(double k)
    {
        double t = T(k);
        double scale = 0.84 + 0.16 * Math.Sin(Math.PI * t);
        double cx = (_w - 1) / 2.0 + 0.012 * _w * LatticeNoise.Line(_seedDrift, 2.5 * t);
        double cy = (_h - 1) / 2.0 + 0.015 * _h * LatticeNoise.Line(_seedDrift, 2.5 * t + 50);
        double a = 0.31 * _w * scale;
        double b = 0.235 * _w * scale * (1 + 0.04 * LatticeNoise.Line(_seedDrift, 2 * t + 100));
        var cos = new double[OutlineTerms + 1];
        var sin = new double[OutlineTerms + 1];
        cos[1] = 0.05; // a little wider at the top than at the base
        for (int m = 2; m <= OutlineTerms; m++)
        {
            double amplitude = 0.07 / m;
            // Symmetric (cosine) terms dominate: the body is bilateral, only roughly.
            cos[m] = amplitude * LatticeNoise.Line(_seedOutline, 2.5 * t + 17 * m);
            sin[m] = 0.25 * amplitude * LatticeNoise.Line(_seedOutline, 2.5 * t + 17 * m + 400);
        }
        return new Body(cx, cy, a, b, cos, sin);
    }

    /// <summary>Centre of the vessel in plane k (truth pixel coordinates); it runs through every section.</summary>
    public (double X, double Y) TubeCentre(double k)
    {
        double t = T(k);
        var body = BodyAt(k);
        double u = 0.22 + 0.2 * Math.Sin(2 * Math.PI * _tubeFreqU * t + _tubePhaseU);
        double v = -0.3 + 0.13 * Math.Sin(2 * Math.PI * _tubeFreqV * t + _tubePhaseV);
        return (body.Cx + u * body.A, body.Cy + v * body.B);
    }

    private static double Ramp(double x) => x <= 0 ? 0 : x >= 1 ? 1 : x;

    /// <summary>Smooth step from 0 to 1 as <paramref name="x"/> passes 0, over about one pixel.</summary>
    private static double Step(double x, double halfWidth)
    {
        double r = Ramp((x + halfWidth) / (2 * halfWidth));
        return r * r * (3 - 2 * r);
    }

    /// <summary>Renders truth plane k (Width × Height, row-major) into <paramref name="plane"/>.</summary>
    public void Render(int k, Span<float> plane)
    {
        int w = _w, h = _h, count = w * h;
        double L = _unit, t = T(k);
        var body = BodyAt(k);
        var rough = ArrayPool<float>.Shared.Rent(count);
        var wobble = ArrayPool<float>.Shared.Rent(count);
        var texture = ArrayPool<float>.Shared.Rent(count);
        var slow = ArrayPool<float>.Shared.Rent(count);
        var cells = ArrayPool<float>.Shared.Rent(count);
        try
        {
            var roughS = rough.AsSpan(0, count);
            var wobbleS = wobble.AsSpan(0, count);
            var textureS = texture.AsSpan(0, count);
            var slowS = slow.AsSpan(0, count);
            var cellsS = cells.AsSpan(0, count);
            roughS.Clear(); wobbleS.Clear(); textureS.Clear(); slowS.Clear(); cellsS.Clear();
            double Cell(double px) => Math.Max(1.0, px * L);
            LatticeNoise.AddToPlane(roughS, w, h, _seedRough, Cell(3), k / 1.5, (float)(0.9 * L));
            LatticeNoise.AddToPlane(wobbleS, w, h, _seedWobble, Cell(10), k / 3.0, (float)(1.6 * L));
            // Fine grain (cell-sized, nearly independent from section to section) and coarser patches that
            // persist over a few sections, so neighbouring sections share texture.
            LatticeNoise.AddToPlane(textureS, w, h, _seedFine, Cell(1.3), k / 0.8, 0.5f);
            LatticeNoise.AddToPlane(textureS, w, h, _seedCoarse, Cell(6), k / 2.5, 0.5f);
            // Stained cell bodies: the peaks of pixel-scale noise, new in every section (cells are smaller
            // than the spacing).
            LatticeNoise.AddToPlane(cellsS, w, h, _seedCells, Cell(1.1), k * 1.37, 1f);
            LatticeNoise.AddToPlane(slowS, w, h, _seedSlow, Cell(60), k / 12.0, 1f);

            // Midline cleft from the top of the outline down about a third of the body.
            double topRadius = body.Radius(1, 0);
            double cleftTop = body.Cy - body.B * topRadius - 4 * L, cleftBottom = body.Cy - body.B * topRadius * 0.62;
            double cleftHalfWidth = 0.45 * L;

            // Deep nuclei: ellipsoids in (u, v, t), slightly larger on the right.
            double nucleusSize = Math.Sqrt(Math.Max(0, 1 - Math.Pow((t - 0.5) / 0.36, 2)));
            // Pale midline canal.
            double canalSize = Math.Sqrt(Math.Max(0, 1 - Math.Pow((t - 0.5) / 0.42, 2)));
            double canalHx = 1.6 * L, canalHy = 0.09 * body.B * canalSize;
            double canalX = body.Cx, canalY = body.Cy - 0.02 * body.B;
            // Vessel: in-plane offset to its centre line, measured perpendicular to the line in µm.
            var (tubeX, tubeY) = TubeCentre(k);
            var (aheadX, aheadY) = TubeCentre(k + 0.5);
            var (behindX, behindY) = TubeCentre(k - 0.5);
            double tx = (aheadX - behindX) * _px, ty = (aheadY - behindY) * _px, tz = _spacing;
            double tn = Math.Sqrt(tx * tx + ty * ty + tz * tz);
            tx /= tn; ty /= tn;
            double tubeOuter = TubeOuterRadiusPx, tubeLumen = TubeLumenRadiusPx;
            // Nodule on the left only: an ellipsoid around t = _noduleT.
            double noduleSize = Math.Sqrt(Math.Max(0, 1 - Math.Pow((t - _noduleT) / _noduleExtentT, 2)));
            double noduleX = body.Cx - 0.45 * body.A, noduleY = body.Cy - 0.3 * body.B;
            double noduleRx = 0.03 * _w * noduleSize, noduleRy = 0.022 * _w * noduleSize;
            // Needle tracks near the right edge, at fixed places relative to the body.
            double hole1X = body.Cx + 0.74 * body.A, hole1Y = body.Cy - 0.25 * body.B;
            double hole2X = body.Cx + 0.76 * body.A, hole2Y = body.Cy + 0.2 * body.B;
            double holeRadius = 1.9 * L, holeInk = holeRadius + 1.4 * L;
            double edge = 1.3; // half-width of soft band edges, px

            for (int y = 0; y < h; y++)
            {
                var row = plane.Slice(y * w, w);
                for (int x = 0; x < w; x++)
                {
                    int i = y * w + x;
                    double dx = x - body.Cx, dy = y - body.Cy;
                    double u = dx / body.A, v = dy / body.B;
                    double re = Math.Sqrt(u * u + v * v), rp = Math.Sqrt(dx * dx + dy * dy);
                    double cosPhi = re > 1e-9 ? -v / re : 1, sinPhi = re > 1e-9 ? u / re : 0;
                    double rho = re / body.Radius(cosPhi, sinPhi);
                    // Distance to the outline along the ray from the centre (negative outside).
                    double toOutline = (rho > 1e-9 ? rp * (1 / rho - 1) : 1e6) + rough[i];

                    double cleftDy = y < cleftTop ? cleftTop - y : y > cleftBottom ? y - cleftBottom : 0;
                    double toCleft = Math.Sqrt(dx * dx + cleftDy * cleftDy) - cleftHalfWidth + 0.6 * rough[i];
                    double depth = Math.Min(toOutline, toCleft);
                    double presence = Ramp(depth + 0.5);
                    if (presence <= 0)
                    {
                        row[x] = 0;
                        continue;
                    }

                    // Inner zone: pale, darker towards the core, with the nuclei and the canal.
                    double core = 0.18 * Math.Exp(-(u * u + (v - 0.05) * (v - 0.05)) / 0.04);
                    double inner = 0.36 + core;
                    if (nucleusSize > 0)
                    {
                        for (int side = -1; side <= 1; side += 2)
                        {
                            double ru = 0.15 * nucleusSize * (side > 0 ? 1.06 : 1.0), rv = 0.2 * nucleusSize;
                            double eu = (u - side * 0.37) / ru, ev = (v - 0.14) / rv;
                            double e = Math.Sqrt(eu * eu + ev * ev);
                            double inside = Ramp((1 - e) * Math.Min(ru * body.A, rv * body.B) / 5 + 0.25);
                            inner += (0.6 - inner) * inside * inside * (3 - 2 * inside);
                        }
                    }
                    if (canalSize > 0)
                    {
                        double ex = (x - canalX) / canalHx, ey = (y - canalY) / canalHy;
                        double e = Math.Sqrt(ex * ex + ey * ey);
                        inner += (0.04 - inner) * Ramp((1 - e) * Math.Min(canalHx, canalHy) + 0.5);
                    }

                    // Cortex-like bands by depth below the surface (pale rim, dense band, pale stripe, medium band).
                    double d = depth + wobble[i];
                    double density = 0.26
                        + (0.72 - 0.26) * Step(d - 2.2 * L, edge)
                        + (0.46 - 0.72) * Step(d - 11.5 * L, edge)
                        + (0.62 - 0.46) * Step(d - 14.0 * L, edge)
                        + (inner - 0.62) * Step(d - 21.5 * L, edge * 1.6);

                    // Vessel: dark wall around a pale lumen; distance perpendicular to its centre line.
                    double ox = (x - tubeX) * _px, oy = (y - tubeY) * _px;
                    double along = ox * tx + oy * ty;
                    double tubeDistance = Math.Sqrt(Math.Max(0, ox * ox + oy * oy - along * along)) / _px;
                    if (tubeDistance < tubeOuter + 1)
                    {
                        density += (0.86 - density) * Ramp(tubeOuter - tubeDistance + 0.5);
                        density += (0.05 - density) * Ramp(tubeLumen - tubeDistance + 0.5);
                    }
                    if (noduleSize > 0)
                    {
                        double ex = (x - noduleX) / noduleRx, ey = (y - noduleY) / noduleRy;
                        double e = Math.Sqrt(ex * ex + ey * ey);
                        density += (0.82 - density) * Ramp((1 - e) * Math.Min(noduleRx, noduleRy) + wobble[i] * 0.5 + 0.5);
                    }

                    double cell = Math.Max(0, cells[i] - 0.3) / 0.7;
                    density = density * (1 + 0.22 * texture[i] + 0.12 * slow[i]) + 0.9 * density * cell;
                    density = Math.Clamp(density, 0, MaxTissueDensity);

                    // Marking on the right only: ink on the block's right face, and two inked needle tracks.
                    double rimInk = Step(sinPhi - 0.77, 0.05) * Ramp(1.8 * L * (1 + 0.3 * slow[i]) - toOutline + 0.5);
                    double hole1 = Math.Sqrt((x - hole1X) * (x - hole1X) + (y - hole1Y) * (y - hole1Y));
                    double hole2 = Math.Sqrt((x - hole2X) * (x - hole2X) + (y - hole2Y) * (y - hole2Y));
                    double hole = Math.Min(hole1, hole2);
                    double ink = Math.Max(rimInk, Ramp(holeInk - hole + 0.5));
                    density += (InkDensity - density) * ink;
                    density *= 1 - Ramp(holeRadius - hole + 0.5);

                    row[x] = (float)(density * presence);
                }
            }
        }
        finally
        {
            ArrayPool<float>.Shared.Return(rough);
            ArrayPool<float>.Shared.Return(wobble);
            ArrayPool<float>.Shared.Return(texture);
            ArrayPool<float>.Shared.Return(slow);
            ArrayPool<float>.Shared.Return(cells);
        }
    }
}
