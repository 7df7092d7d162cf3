using System.Globalization;
using System.Net;
using System.Text.Json;
using Microsoft.Playwright;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Nifti;
using StackBuild.Viewer;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The viewer in a real browser (Debian's Chromium driven by Microsoft.Playwright): the page loads, a tilt control
/// changes the plane, and what the page shows equals, pixel for pixel, what <c>stackbuild reslice</c> writes.
/// </summary>
public class ViewerBrowserTests(ITestOutputHelper output)
{
    private const string Chromium = "/usr/bin/chromium";

    // As measured in docs/NOTES.md for this machine; the colour profile is pinned so grey values arrive unchanged.
    private static readonly string[] ChromiumArgs =
    [
        "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run", "--disable-quic", "--force-color-profile=srgb",
    ];

    [Fact]
    public async Task TiltingInThePageShowsTheSamePlaneAsTheResliceCommand()
    {
        Assert.True(File.Exists(Chromium), $"{Chromium} is missing: install the Debian package chromium (apt-get install -y chromium); tests/run.sh does this as root");
        var folder = Directory.CreateTempSubdirectory("stackbuild-viewer-").FullName;
        try
        {
            var path = ResliceTestSupport.WriteNifti(ResliceTestSupport.Phantom(96, 80, 36), folder);
            var volume = NiftiFile.Read(path).ToVolume();
            await using var server = await ViewerServer.StartAsync(volume, "phantom.nii.gz", IPAddress.Loopback, 0);
            Assert.Equal("127.0.0.1", server.Url.Host);

            using var playwright = await Playwright.CreateAsync();
            await using var browser = await playwright.Chromium.LaunchAsync(new BrowserTypeLaunchOptions
            {
                ExecutablePath = Chromium, Args = ChromiumArgs, Headless = true,
            });
            var page = await browser.NewPageAsync(new BrowserNewPageOptions { ViewportSize = new ViewportSize { Width = 1280, Height = 800 } });
            var pageErrors = new List<string>();
            page.PageError += (_, e) => pageErrors.Add(e);
            page.Console += (_, m) => { if (m.Type == "error") pageErrors.Add(m.Text); };
            // Coalescing: never more than one plane request open at a time, however fast the controls move.
            int open = 0, mostOpen = 0, planeRequests = 0;
            var gate = new object();
            bool IsPlane(IRequest r) => r.Url.Contains("/api/plane.png", StringComparison.Ordinal);
            page.Request += (_, r) => { if (IsPlane(r)) lock (gate) { planeRequests++; mostOpen = Math.Max(mostOpen, ++open); } };
            page.RequestFinished += (_, r) => { if (IsPlane(r)) lock (gate) open--; };
            page.RequestFailed += (_, r) => { if (IsPlane(r)) lock (gate) open--; };
            await page.GotoAsync(server.Url.ToString());
            await WaitUntilShownAsync(page);
            var before = await ShownPixelsAsync(page);

            // Drag-like input: 30 key presses on the tilt slider (0.5° each) fire 30 input events in quick succession.
            await page.Locator("#tiltH").FocusAsync();
            for (int n = 0; n < 30; n++) await page.Keyboard.PressAsync("ArrowRight");
            await page.Locator("#tiltV-number").FillAsync("-12.5");
            await WaitUntilShownAsync(page);
            var query = await page.Locator("#plane").GetAttributeAsync("data-shown") ?? "";
            var parameters = query.Split('&').Select(p => p.Split('=')).ToDictionary(p => p[0], p => Uri.UnescapeDataString(p[1]));
            Assert.Equal("15", parameters["tiltH"]);
            lock (gate)
            {
                Assert.Equal(1, mostOpen);
                Assert.InRange(planeRequests, 2, 33); // the first plane, then at most one per control change
            }
            Assert.Equal("-12.5", parameters["tiltV"]);
            var after = await ShownPixelsAsync(page);
            Assert.True(before.Width != after.Width || before.Height != after.Height || !before.Gray.SequenceEqual(after.Gray),
                "the plane image did not change after tilting");
            Assert.True(after.Gray.Distinct().Count() > 20, "the tilted plane shows almost no grey levels; it should cut through the phantom");

            // The same plane from the command line, with its own default window.
            var png = Path.Combine(folder, "plane.png");
            var (exit, _, err) = ResliceTestSupport.Cli("reslice", path, "--plane", parameters["plane"],
                "--tilt", $"{parameters["tiltH"]},{parameters["tiltV"]}", "--offset", parameters["depth"], "-o", png);
            Assert.True(exit == 0, err);
            using (var written = Image.Load<L8>(png))
            {
                Assert.Equal((written.Width, written.Height), (after.Width, after.Height));
                int differing = 0;
                for (int y = 0; y < written.Height; y++)
                for (int x = 0; x < written.Width; x++)
                    if (written[x, y].PackedValue != after.Gray[y * after.Width + x]) differing++;
                Assert.Equal(0, differing);
            }
            Assert.True(after.Grey, "the page's image should be grey (R = G = B)");

            // Pointer readout: the centre pixel of the image is the plane's centre in mm.
            var box = (await page.Locator("#plane").BoundingBoxAsync())!;
            await page.Mouse.MoveAsync(box.X + box.Width / 2, box.Y + box.Height / 2);
            var mmText = await page.Locator("#pointer-mm").TextContentAsync() ?? "";
            var plane = JsonDocument.Parse(await page.EvaluateAsync<string>("() => JSON.stringify(view.geometry)")).RootElement;
            var centre = plane.GetProperty("centreMm").EnumerateArray().Select(e => e.GetDouble()).ToArray();
            var shownMm = mmText.Split(',').Select(s => double.Parse(s, CultureInfo.InvariantCulture)).ToArray();
            for (int a = 0; a < 3; a++) Assert.Equal(centre[a], shownMm[a], 0.03); // within about one pixel (20 µm) and rounding

            var artifacts = Path.Combine(AppContext.BaseDirectory, "artifacts");
            Directory.CreateDirectory(artifacts);
            var shot = Path.Combine(artifacts, "viewer.png");
            await page.ScreenshotAsync(new PageScreenshotOptions { Path = shot });
            output.WriteLine($"screenshot: {shot}");
            Assert.True(pageErrors.Count == 0, "the page reported errors: " + string.Join(" | ", pageErrors));
        }
        finally
        {
            Directory.Delete(folder, recursive: true);
        }
    }

    private static async Task WaitUntilShownAsync(IPage page) =>
        await page.WaitForFunctionAsync(
            "() => { const i = document.getElementById('plane'); return i.dataset.shown && i.dataset.shown === i.dataset.wanted && i.complete; }",
            null, new PageWaitForFunctionOptions { Timeout = 15000 });

    private sealed record Shown(int Width, int Height, int[] Gray, bool Grey);

    // The image as the page decoded it: drawn at its own size into a canvas and read back.
    private static async Task<Shown> ShownPixelsAsync(IPage page)
    {
        var json = await page.EvaluateAsync<string>(@"() => {
            const img = document.getElementById('plane');
            const c = document.createElement('canvas');
            c.width = img.naturalWidth; c.height = img.naturalHeight;
            const g = c.getContext('2d');
            g.drawImage(img, 0, 0);
            const d = g.getImageData(0, 0, c.width, c.height).data;
            const gray = new Array(c.width * c.height);
            let grey = true;
            for (let p = 0; p < gray.length; p++) {
                gray[p] = d[4 * p];
                if (d[4 * p + 1] !== d[4 * p] || d[4 * p + 2] !== d[4 * p]) grey = false;
            }
            return JSON.stringify({ width: c.width, height: c.height, gray, grey });
        }");
        var e = JsonDocument.Parse(json).RootElement;
        return new Shown(e.GetProperty("width").GetInt32(), e.GetProperty("height").GetInt32(),
            e.GetProperty("gray").EnumerateArray().Select(v => v.GetInt32()).ToArray(), e.GetProperty("grey").GetBoolean());
    }
}
