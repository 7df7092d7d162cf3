using System.Globalization;
using System.Text.Json;
using System.Text.RegularExpressions;
using Microsoft.Playwright;
using StackBuild.Demo;
using StackBuild.Pipeline;
using StackBuild.Write;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>One small demo series built and written once for all report tests.</summary>
public sealed class BuildReportFixture : IDisposable
{
    public string Folder { get; } = Directory.CreateTempSubdirectory("sb-report-").FullName;
    public BuildOutputPaths Paths { get; }
    public BuildResult Result { get; }
    public BuildRecord Sidecar { get; }
    public int DamagedSection { get; }

    public BuildReportFixture()
    {
        var series = Path.Combine(Folder, "series");
        DemoSpecimenMaker.WriteFiles(DemoSpecimenMaker.Make(new DemoOptions { Sections = 12, Size = 96 }), series);
        // Mark one present section past the first few damaged, so the flagged part of the report is always exercised.
        var manifest = Path.Combine(series, DemoSpecimenMaker.ManifestFileName);
        var lines = File.ReadAllLines(manifest);
        int row = Array.FindIndex(lines, l => Regex.IsMatch(l, @"^([4-9]|1[0-2]),section_\d+\.png,"));
        var cells = lines[row].Split(',');
        DamagedSection = int.Parse(cells[0], CultureInfo.InvariantCulture);
        cells[4] = "yes";
        cells[5] = "scratched";
        lines[row] = string.Join(',', cells[..6]);
        File.WriteAllLines(manifest, lines);
        Result = BuildPipeline.Run(new BuildOptions { Input = series });
        Paths = BuildOutputPaths.For(Path.Combine(Folder, "small.nii.gz"));
        BuildWriter.Write(BuildReview.Review(Result), Paths);
        Sidecar = JsonSerializer.Deserialize<BuildRecord>(File.ReadAllText(Paths.Sidecar))!;
    }

    public void Dispose()
    {
        try { Directory.Delete(Folder, true); } catch (IOException) { }
    }
}

/// <summary>The build's HTML report: opened in Debian's Chromium (Playwright), checked against the sidecar, self-contained, atomic.</summary>
public sealed class BuildReportTests(BuildReportFixture fixture, ITestOutputHelper output) : IClassFixture<BuildReportFixture>
{
    private const string Chromium = "/usr/bin/chromium";

    // As in the viewer tests (docs/NOTES.md for this machine).
    private static readonly string[] ChromiumArgs =
    [
        "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run", "--disable-quic", "--force-color-profile=srgb",
    ];

    private static double Number(string text) => double.Parse(text.Trim(), CultureInfo.InvariantCulture);

    [Fact]
    public async Task ReportOpensInChromiumAndShowsTheSidecarsNumbers()
    {
        Assert.True(File.Exists(Chromium), $"{Chromium} is missing: install the Debian package chromium (apt-get install -y chromium); tests/run.sh does this as root");
        Assert.True(File.Exists("/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf"),
            "plot text needs fonts: apt-get install -y fonts-dejavu-core (tests/run.sh does this as root)");
        var sidecar = fixture.Sidecar;
        using var playwright = await Playwright.CreateAsync();
        await using var browser = await playwright.Chromium.LaunchAsync(new BrowserTypeLaunchOptions { ExecutablePath = Chromium, Args = ChromiumArgs, Headless = true });
        var page = await browser.NewPageAsync(new BrowserNewPageOptions { ViewportSize = new ViewportSize { Width = 1400, Height = 1000 } });
        var problems = new List<string>();
        page.PageError += (_, e) => problems.Add(e);
        page.Console += (_, m) => { if (m.Type == "error") problems.Add(m.Text); };
        page.Request += (_, r) => { if (!r.Url.StartsWith("file:", StringComparison.Ordinal) && !r.Url.StartsWith("data:", StringComparison.Ordinal)) problems.Add("request to " + r.Url); };
        await page.GotoAsync(new Uri(fixture.Paths.Report).AbsoluteUri);

        // Every image decoded (data: PNGs of plots, planes and thumbnails).
        int broken = await page.EvaluateAsync<int>("() => [...document.images].filter(i => !i.complete || i.naturalWidth === 0).length");
        int images = await page.EvaluateAsync<int>("() => document.images.length");
        Assert.Equal(0, broken);
        Assert.True(images >= 9, $"{images} images: expected 5 plots, 4 planes and the flagged thumbnails");

        // Summary counts against the sidecar.
        async Task<int> Count(string name) => int.Parse(await page.Locator($"#count-{name} .value").TextContentAsync() ?? "", CultureInfo.InvariantCulture);
        Assert.Equal(sidecar.Sections.Count(s => s.Status == SectionOutcome.Aligned), await Count("aligned"));
        Assert.Equal(sidecar.Sections.Count(s => s.Status == SectionOutcome.Gap), await Count("gaps"));
        Assert.Equal(sidecar.Sections.Count(s => s.File is not null), await Count("found"));
        Assert.Equal(sidecar.Sections.Count(s => s.Status is SectionOutcome.Aligned && s.Mirrored == true), await Count("mirrored"));
        double limit = SectionFlags.DisagreementLimitUm(sidecar);
        var flagged = sidecar.Sections.Where(s => SectionFlags.Reasons(s, limit).Count > 0).Select(s => s.Number).ToList();
        Assert.Contains(fixture.DamagedSection, flagged); // marked damaged by the fixture
        Assert.Equal(flagged.Count, await Count("flagged"));
        Assert.Equal(flagged.Count, await page.Locator("#flagged .flag").CountAsync());
        Assert.Equal(sidecar.AxisCodes, (await page.Locator("#axis-codes td").TextContentAsync() ?? "")[..3]);
        string voxel = string.Join(" × ", sidecar.VoxelSizeMm.Select(v => (v * 1000).ToString("0.###", CultureInfo.InvariantCulture))) + " µm";
        Assert.Equal(voxel, await page.Locator("#voxel-size td").TextContentAsync());

        // Table cells of three aligned sections against the sidecar (shown rounded).
        var checkedSections = sidecar.Sections.Where(s => s.Status == SectionOutcome.Aligned && s.Confidence is not null).Take(3).ToList();
        Assert.Equal(3, checkedSections.Count);
        foreach (var s in checkedSections)
        {
            var row = page.Locator($"#section-{s.Number}");
            Assert.Equal(s.File, await row.Locator("td.file").TextContentAsync());
            Assert.Equal(s.RotationDegrees!.Value, Number(await row.Locator("td.rotation").TextContentAsync() ?? ""), 0.0051);
            Assert.Equal(s.Confidence!.Value, Number(await row.Locator("td.confidence").TextContentAsync() ?? ""), 0.00051);
            Assert.Equal(s.Ncc!.Value, Number(await row.Locator("td.ncc").TextContentAsync() ?? ""), 0.00051);
            Assert.Equal(s.EstimatedErrorUm!.Value, Number(await row.Locator("td.error").TextContentAsync() ?? ""), 0.051);
            Assert.Equal(s.Mirrored == true ? "yes" : "no", await row.Locator("td.mirrored").TextContentAsync());
            var shift = (await row.Locator("td.shift").TextContentAsync() ?? "").Split(',').Select(Number).ToArray();
            double um = sidecar.VoxelSizeMm[0] * 1000;
            Assert.Equal(s.ShiftPx![0] * um, shift[0], 0.051);
            Assert.Equal(s.ShiftPx![1] * um, shift[1], 0.051);
        }
        Assert.Equal(sidecar.Sections.Count, await page.Locator("#sections tbody tr").CountAsync());

        var artifacts = Path.Combine(AppContext.BaseDirectory, "artifacts");
        Directory.CreateDirectory(artifacts);
        var shot = Path.Combine(artifacts, "report.png");
        await page.ScreenshotAsync(new PageScreenshotOptions { Path = shot, FullPage = true });
        output.WriteLine($"screenshot: {shot}");
        Assert.True(problems.Count == 0, "the page reported problems: " + string.Join(" | ", problems));
    }

    [Fact]
    public void ReportIsSelfContained()
    {
        var html = File.ReadAllText(fixture.Paths.Report);
        Assert.StartsWith("<!DOCTYPE html>", html);
        var links = Regex.Matches(html, @"\b(?:src|href)\s*=\s*""([^""]*)""", RegexOptions.IgnoreCase).Select(m => m.Groups[1].Value).ToList();
        Assert.NotEmpty(links);
        Assert.All(links, l => Assert.StartsWith("data:image/png;base64,", l));
        Assert.DoesNotMatch(@"(?i)https?://|<script|<link|@import|url\(", html);
        // The sidecar carries the estimate for every placed section, and the report is written beside it.
        Assert.All(fixture.Sidecar.Sections.Where(s => s.Status == SectionOutcome.Aligned), s => Assert.NotNull(s.EstimatedErrorUm));
        Assert.Equal(Path.Combine(fixture.Folder, "small.report.html"), fixture.Paths.Report);
    }

    [Fact]
    public void AFailedReportLeavesNoPartialFile()
    {
        var folder = Directory.CreateDirectory(Path.Combine(fixture.Folder, "atomic")).FullName;
        var path = Path.Combine(folder, "broken.report.html");
        File.WriteAllText(path, "earlier report");
        // A record whose damaged section points past the last plane: the report fails while drawing its thumbnail,
        // after the page's first parts were already written to the temporary file.
        var bad = fixture.Result with
        {
            Record = fixture.Result.Record with
            {
                Sections = [.. fixture.Result.Record.Sections.Select(s => s.Number == fixture.DamagedSection ? s with { ZIndex = fixture.Result.Volume.Nz + 5 } : s)],
            },
        };
        Assert.ThrowsAny<ArgumentException>(() => BuildReport.Write(path, bad, "broken.nii.gz"));
        Assert.Equal("earlier report", File.ReadAllText(path));
        Assert.Equal(["broken.report.html"], Directory.GetFiles(folder).Select(Path.GetFileName));
    }

    [Fact]
    public void ASectionTheTemplateMovedAgainstItsLinkIsFlaggedOnceBeyondTwoVoxels()
    {
        // 20 µm voxels: a move of 41 µm against the link to the section before is more than 2 voxels; 39 µm is not; a section
        // placed by its own template match (already flagged for that) or one at a chain step gets no second reason.
        SectionRecord With(double change, bool byTemplate = false, bool step = false) => new()
        {
            Number = 7, Status = SectionOutcome.Aligned, Confidence = 0.9,
            Template = new SectionTemplateRecord { Matched = true, Similarity = 0.3, LinkChangeUm = change, PlacedByTemplate = byTemplate, ChainStep = step },
        };
        bool Moved(SectionRecord s) => SectionFlags.Reasons(s, 1e9, 20).Any(r => r.StartsWith("the template moved it", StringComparison.Ordinal));
        Assert.True(Moved(With(41)));
        Assert.False(Moved(With(39)));
        Assert.False(Moved(With(400, byTemplate: true)));
        Assert.False(Moved(With(400, step: true)));
        Assert.Contains("41 µm", SectionFlags.Reasons(With(41), 1e9, 20).Single(r => r.StartsWith("the template moved it", StringComparison.Ordinal)));
    }
}
