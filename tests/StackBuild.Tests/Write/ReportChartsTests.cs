using System.Text.RegularExpressions;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Imaging;
using StackBuild.Pipeline;
using StackBuild.Write;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The report's pictures say what their legends say: the flagged-section overlay is grey where two sections differ
/// only in brightness, chart lines stop at gaps, the turn chart shows the turn between neighbours, and the oblique
/// plane's corners outside the volume show the page.
/// </summary>
public sealed class ReportChartsTests(BuildReportFixture fixture) : IClassFixture<BuildReportFixture>
{
    [Fact]
    public void OverlayOfTwoSectionsThatDifferOnlyInBrightnessIsGrey()
    {
        var first = new GrayImage(64, 48);
        var random = new Random(5);
        for (int y = 0; y < 48; y++)
        for (int x = 0; x < 64; x++)
            first[x, y] = (float)(40 + 80 * Math.Sin(x / 5.0) * Math.Cos(y / 7.0) + 80 + random.NextDouble() * 20);
        // The same tissue stained or scanned 45 % fainter on a brighter ground: a linear change of brightness.
        var second = new GrayImage(64, 48);
        for (int p = 0; p < first.Pixels.Length; p++) second.Pixels[p] = 0.55f * first.Pixels[p] + 30;
        using var image = Image.Load<Rgb24>(ReportImages.Overlay(first, second));
        int worst = 0;
        for (int y = 0; y < image.Height; y++)
        for (int x = 0; x < image.Width; x++)
        {
            var c = image[x, y];
            worst = Math.Max(worst, Math.Abs(c.R - c.G));
            Assert.Equal(c.R, c.B); // magenta = red and blue alike
        }
        // Analytic: a linear brightness change maps to the same value after each image's own percentile window
        // (percentiles commute with increasing linear maps); only rounding of the 8-bit values may differ.
        Assert.InRange(worst, 0, 1);
    }

    [Fact]
    public void ChartRunsBreakWhereSectionNumbersSkip()
    {
        var runs = ReportPlots.Runs([1, 2, 3, 5, 6, 9]);
        Assert.Equal([[0, 1, 2], [3, 4], [5]], runs.Select(r => r.ToArray()).ToArray());
        // On the built demo: no run spans a section that is not aligned or placed.
        var placed = fixture.Sidecar.Sections.Where(s => s.Status is SectionOutcome.Aligned or SectionOutcome.Placed).Select(s => s.Number).OrderBy(n => n).ToList();
        var absent = fixture.Sidecar.Sections.Where(s => s.Status is not (SectionOutcome.Aligned or SectionOutcome.Placed)).Select(s => s.Number).ToHashSet();
        Assert.NotEmpty(absent); // the demo has gaps, or this proves nothing
        foreach (var run in ReportPlots.Runs(placed))
            for (int n = placed[run[0]]; n <= placed[run[^1]]; n++) Assert.DoesNotContain(n, absent);
    }

    [Fact]
    public void TurnChartShowsTheTurnBetweenNeighboursFromTheirMatrices()
    {
        var turns = ReportPlots.RelativeTurns(fixture.Sidecar);
        var byNumber = fixture.Sidecar.Sections.ToDictionary(s => s.Number);
        var sameSide = turns.Where(t => t.SameSide && byNumber[t.Number].Mirrored != true).ToList();
        Assert.True(sameSide.Count >= 2, $"only {sameSide.Count} face-up pairs to check");
        foreach (var t in sameSide)
        {
            // Independently of rotation_deg: the map from the section's scan to its neighbour's scan is
            // inverse(M_neighbour)·M_section of the sidecar matrices; its angle is atan2(m10, m00) (y down, +x towards +y).
            double[,] a = ToMatrix(byNumber[t.Neighbour].Matrix!), b = ToMatrix(byNumber[t.Number].Matrix!);
            double det = a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0];
            double[,] inv = { { a[1, 1] / det, -a[0, 1] / det }, { -a[1, 0] / det, a[0, 0] / det } };
            double m00 = inv[0, 0] * b[0, 0] + inv[0, 1] * b[1, 0], m10 = inv[1, 0] * b[0, 0] + inv[1, 1] * b[1, 0];
            double expected = Math.Atan2(m10, m00) * 180 / Math.PI;
            double difference = Math.IEEERemainder(t.Degrees - expected, 360);
            Assert.True(Math.Abs(difference) < 1e-6, $"section {t.Number}: chart {t.Degrees}°, matrices {expected}°");
        }
    }

    [Fact]
    public void ObliquePlaneCornersOutsideTheVolumeAreTransparent()
    {
        var html = File.ReadAllText(fixture.Paths.Report);
        var match = Regex.Match(html, @"<figure id=""plane-oblique""><img src=""data:image/png;base64,([^""]+)""");
        Assert.True(match.Success, "the report has no oblique plane image");
        using var image = Image.Load<La16>(Convert.FromBase64String(match.Groups[1].Value));
        Assert.Equal(0, image[0, 0].A); // a tilted plane's corner lies outside the stack
        Assert.Equal(255, image[image.Width / 2, image.Height / 2].A); // its centre inside
        Assert.DoesNotContain("background:#000", html);
    }

    private static double[,] ToMatrix(double[][] rows) => new[,] { { rows[0][0], rows[0][1] }, { rows[1][0], rows[1][1] } };
}
