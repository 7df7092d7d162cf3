using System.Globalization;
using System.Net;
using System.Text.Json;
using Microsoft.Playwright;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Reslice;
using StackBuild.Viewer;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// The viewer in a real browser (Debian's Chromium driven by Microsoft.Playwright): the four planes show what nibabel's
/// array slices and SciPy's map_coordinates say they should, clicking and keys move the shared cursor, the page address
/// brings a view back, overlays on other grids land where SciPy puts them, and the oblique plane equals what
/// <c>stackbuild reslice</c> writes.
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

    private static readonly string[] AxisTiles = ["section", "ik", "jk"];

    [Fact]
    public async Task TiltingTheObliquePlaneShowsTheSamePlaneAsTheResliceCommand()
    {
        await WithViewerAsync(ResliceTestSupport.Phantom(96, 80, 36), null, async (path, volume, server, session) =>
        {
            Assert.Equal("127.0.0.1", server.Url.Host);
            var page = session.Page;
            // Coalescing: never more than one request open at a time for the oblique image, however fast the controls move.
            int open = 0, mostOpen = 0, requests = 0;
            var gate = new object();
            bool IsOblique(IRequest r) => r.Url.Contains("/api/plane.png", StringComparison.Ordinal) && !r.Url.Contains("tiltH=0&tiltV=0", StringComparison.Ordinal);
            page.Request += (_, r) => { if (IsOblique(r)) lock (gate) { requests++; mostOpen = Math.Max(mostOpen, ++open); } };
            page.RequestFinished += (_, r) => { if (IsOblique(r)) lock (gate) open--; };
            page.RequestFailed += (_, r) => { if (IsOblique(r)) lock (gate) open--; };
            await page.GotoAsync(server.Url.ToString());
            await WaitUntilShownAsync(page);
            var before = await ShownPixelsAsync(page, "#plane-oblique");

            // Drag-like input: 30 key presses on the tilt slider (0.5° each) fire 30 input events in quick succession.
            await page.Locator("#tiltH").FocusAsync();
            for (int n = 0; n < 30; n++) await page.Keyboard.PressAsync("ArrowRight");
            await page.Locator("#tiltV-number").FillAsync("-12.5");
            await WaitUntilShownAsync(page);
            var parameters = await ShownQueryAsync(page, "#plane-oblique");
            Assert.Equal("15", parameters["tiltH"]);
            Assert.Equal("-12.5", parameters["tiltV"]);
            lock (gate)
            {
                Assert.Equal(1, mostOpen);
                Assert.InRange(requests, 1, 32); // at most one per control change
            }
            var after = await ShownPixelsAsync(page, "#plane-oblique");
            Assert.True(before.Width != after.Width || before.Height != after.Height || !before.Gray.SequenceEqual(after.Gray),
                "the oblique plane did not change after tilting");
            Assert.True(after.Gray.Distinct().Count() > 20, "the tilted plane shows almost no grey levels; it should cut through the phantom");

            // The same plane from the command line, with its own default window.
            var png = Path.Combine(Path.GetDirectoryName(path)!, "plane.png");
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
            await session.ScreenshotAsync("viewer.png", output);
            session.AssertNoErrors();
        });
    }

    [Fact]
    public async Task PlanesShowNibabelSlicesAndClicksAndKeysMoveTheCursor()
    {
        await WithViewerAsync(IsotropicPhantom(44, 36, 30), null, async (path, volume, server, session) =>
        {
            var page = session.Page;
            // The window 0..255 on 8-bit values shows each value as itself.
            await page.GotoAsync(server.Url + "#w=0,255");
            await WaitUntilShownAsync(page);

            var cursor = await CursorAsync(page);
            Assert.Equal([22, 18, 15], cursor); // the middle voxel, n / 2 on each axis
            await AssertAxisPlanesMatchNibabelAsync(page, path, cursor, 0, 255);

            // The oblique plane against SciPy's map_coordinates (order 1) at the page's own plane geometry.
            await page.Locator("#tiltH-number").FillAsync("25");
            await page.Locator("#tiltV-number").FillAsync("-30");
            await page.Locator("#depth-number").FillAsync("0.15");
            await WaitUntilShownAsync(page);
            var oblique = await GeometryAsync(page, "oblique");
            var plane = PlaneOf(oblique);
            var (reference, scipy) = ResliceScipyTests.RunScipy(volume, plane, fill: 0f, nearest: false);
            var shown = await ShownPixelsAsync(page, "#plane-oblique");
            Assert.Equal((plane.Width, plane.Height), (shown.Width, shown.Height));
            int worst = 0;
            for (int p = 0; p < reference.Length; p++)
                worst = Math.Max(worst, Math.Abs(Gray8(reference[p], 0, 255) - shown.Gray[p]));
            Assert.InRange(worst, 0, 1); // float32 here against float64 in SciPy: at most one grey level apart
            Assert.InRange(scipy.GetProperty("inside").GetInt32(), reference.Length / 4, reference.Length - 1); // the plane really cuts the volume

            // A click on the section plane moves the cursor to the voxel under the pointer; the other planes pass through it.
            await ClickPixelAsync(page, "section", 31, 9);
            await WaitUntilShownAsync(page);
            cursor = await CursorAsync(page);
            Assert.Equal([31, 9, 15], cursor);
            await AssertAxisPlanesMatchNibabelAsync(page, path, cursor, 0, 255);
            Assert.Equal("31,9", await page.Locator("#tile-section").GetAttributeAsync("data-cursor-pixel")); // the cross-hair sits on the clicked voxel
            Assert.Equal("31,15", await page.Locator("#tile-ik").GetAttributeAsync("data-cursor-pixel"));      // i across, k down
            Assert.Equal("9,15", await page.Locator("#tile-jk").GetAttributeAsync("data-cursor-pixel"));       // j across, k down

            // "Through cursor" moves the oblique plane along its depth onto the cursor's voxel centre.
            await page.Locator("#through-cursor").ClickAsync();
            await WaitUntilShownAsync(page);
            var moved = PlaneOf(await GeometryAsync(page, "oblique"));
            var (cx, cy, cz) = volume.Affine.Apply(31, 9, 15);
            double off = (new Vector3D(cx, cy, cz) - moved.Centre).Dot(moved.Normal);
            Assert.True(Math.Abs(off) < 1e-4, $"the oblique plane passes {off} mm from the cursor");

            // A click on the j–k plane moves i's neighbours: the cursor takes j and k from the click.
            await ClickPixelAsync(page, "jk", 20, 4);
            await WaitUntilShownAsync(page);
            int[] afterSecondClick = await CursorAsync(page);
            Assert.Equal([31, 20, 4], afterSecondClick);

            // Keys: 2 chooses the i–k plane, ↑ twice steps it two planes on along j.
            await page.Locator("body").ClickAsync(new LocatorClickOptions { Position = new Position { X = 2, Y = 2 } });
            await page.Keyboard.PressAsync("2");
            await page.Keyboard.PressAsync("ArrowUp");
            await page.Keyboard.PressAsync("ArrowUp");
            await WaitUntilShownAsync(page);
            cursor = await CursorAsync(page);
            Assert.Equal([31, 22, 4], cursor);
            await AssertAxisPlanesMatchNibabelAsync(page, path, cursor, 0, 255);

            // "Save plane as PNG" saves the chosen (i–k) plane enlarged, with margins for letters and the scale bar:
            // every enlarged pixel is nibabel's value.
            var download = await page.RunAndWaitForDownloadAsync(() => page.Locator("#snapshot").ClickAsync());
            Assert.Equal("phantom-ik.png", download.SuggestedFilename);
            var saved = Path.Combine(Path.GetDirectoryName(path)!, "saved.png");
            await download.SaveAsAsync(saved);
            var ik = JsonDocument.Parse(NiftiPython.Run("nibabel_planes.py", path, "31", "22", "4", "0", "255")).RootElement.GetProperty("ik");
            int width = ik.GetProperty("width").GetInt32(), height = ik.GetProperty("height").GetInt32();
            var layout = FigureLayout.For(width, height);
            var expectedGray = ik.GetProperty("gray").EnumerateArray().Select(v => v.GetInt32()).ToArray();
            using (var figure = Image.Load<Rgb24>(saved))
            {
                Assert.Equal((layout.FigureWidth(width), layout.FigureHeight(height)), (figure.Width, figure.Height));
                int wrong = 0;
                for (int y = 0; y < height; y++)
                for (int x = 0; x < width; x++)
                {
                    var c = figure[layout.Margin + x * layout.Zoom + layout.Zoom / 2, layout.Margin + y * layout.Zoom + layout.Zoom / 2];
                    int v = expectedGray[y * width + x];
                    if (c.R != v || c.G != v || c.B != v) wrong++;
                }
                Assert.Equal(0, wrong);
            }
            await session.ScreenshotAsync("viewer-planes.png", output);
            session.AssertNoErrors();
        });
    }

    [Fact]
    public async Task ThePageAddressBringsTheViewBack()
    {
        await WithViewerAsync(IsotropicPhantom(40, 34, 26), null, async (path, volume, server, session) =>
        {
            var page = session.Page;
            await page.GotoAsync(server.Url.ToString());
            await WaitUntilShownAsync(page);
            // Change everything the address holds: oblique plane, window, sampling, cursor, chosen plane.
            await page.Locator("#orientation").SelectOptionAsync("jk");
            await page.Locator("#tiltH-number").FillAsync("-20");
            await page.Locator("#tiltV-number").FillAsync("35.5");
            await page.Locator("#depth-number").FillAsync("-0.12");
            await page.Locator("#low-number").FillAsync("30");
            await page.Locator("#high-number").FillAsync("210");
            await page.Locator("#nearest").CheckAsync();
            await ClickPixelAsync(page, "ik", 7, 21);
            await page.Keyboard.PressAsync("4");
            await WaitUntilShownAsync(page);
            var address = page.Url;
            Assert.Contains("#", address);
            var first = await ViewStateAsync(page);

            // A colleague opens the address in a fresh page.
            var other = await session.NewPageAsync();
            await other.GotoAsync(address);
            await WaitUntilShownAsync(other);
            var second = await ViewStateAsync(other);
            Assert.Equal(first, second);
            Assert.Equal(address, other.Url);
            var cursor = await CursorAsync(other);
            Assert.Equal([7, 17, 21], cursor); // the i–k plane at j = 34 / 2 was clicked at (i 7, k 21)
            // What the reopened page shows, against nibabel with the window from the address (nearest voxel: exact values).
            await AssertAxisPlanesMatchNibabelAsync(other, path, cursor, 30, 210);
            // A new address pasted into an open page takes effect too.
            await other.EvaluateAsync("() => { location.hash = location.hash.replace(/c=[^&]*/, 'c=3%2C4%2C5'); }");
            await other.WaitForFunctionAsync("() => document.getElementById('cursor-voxel').textContent === '3, 4, 5'");
            await WaitUntilShownAsync(other);
            await AssertAxisPlanesMatchNibabelAsync(other, path, [3, 4, 5], 30, 210);
            session.AssertNoErrors();
        });
    }

    [Fact]
    public async Task OverlaysOnOtherGridsLandWhereScipyPutsThem()
    {
        // A smooth "second stain" on a turned, coarser, shifted grid, and a label volume on a third grid.
        var stain = OtherGrid(40, 38, 34, 0.06, 0.05, 0.07, turnDeg: 20, tiltDeg: 10, shift: (0.1, -0.08, 0.05));
        for (int k = 0; k < stain.Nz; k++)
        for (int j = 0; j < stain.Ny; j++)
        for (int i = 0; i < stain.Nx; i++)
            stain[i, j, k] = (float)(500 + 300 * Math.Sin(i / 4.0) * Math.Cos(j / 5.0 + k / 6.0));
        var labels = OtherGrid(24, 22, 20, 0.1, 0.1, 0.1, turnDeg: -35, tiltDeg: 5, shift: (-0.05, 0.03, 0));
        for (int k = 0; k < labels.Nz; k++)
        for (int j = 0; j < labels.Ny; j++)
        for (int i = 0; i < labels.Nx; i++)
            labels[i, j, k] = (i / 6 + 2 * (j / 7) + k / 10) % 5;
        var options = new ViewerOptions { Overlays = [new ViewerOverlay(stain, "stain.nii.gz", false), new ViewerOverlay(labels, "regions.nii.gz", true)] };
        await WithViewerAsync(IsotropicPhantom(44, 36, 30), options, async (path, volume, server, session) =>
        {
            var page = session.Page;
            // Stain shown fully opaque between 300 and 750; labels as flat colours.
            await page.GotoAsync(server.Url + "#c=25,14,11&t=20,-25&d=0.1&o0=1,130,1,300,750&o1=1,fill,1,0,1");
            await WaitUntilShownAsync(page);

            foreach (var tile in new[] { "oblique", "section", "jk" })
            {
                var plane = PlaneOf(await GeometryAsync(page, tile));
                // The stain: its layer's alpha is the windowed value; SciPy samples the stain's own grid at the plane's world points.
                var (reference, _) = ResliceScipyTests.RunScipy(stain, plane, fill: -1e9f, nearest: false);
                var alpha = await ShownAlphaAsync(page, $"#layer-{tile}-0");
                Assert.Equal(plane.Width * plane.Height, alpha.Length);
                int worst = 0, inside = 0;
                for (int p = 0; p < reference.Length; p++)
                {
                    bool outside = reference[p] < -1e8f;
                    if (!outside) inside++;
                    int expected = outside ? 0 : Gray8(reference[p], 300, 750);
                    worst = Math.Max(worst, Math.Abs(expected - alpha[p]));
                }
                Assert.True(worst <= 1, $"{tile}: the stain layer differs from SciPy by {worst} levels"); // float32 against float64
                Assert.InRange(inside, reference.Length / 4, reference.Length); // the stain's grid covers much of the plane

                // The labels: coloured exactly where SciPy's nearest-voxel sample is a non-zero label.
                var (labelReference, _) = ResliceScipyTests.RunScipy(labels, plane, fill: 0f, nearest: true);
                var labelAlpha = await ShownAlphaAsync(page, $"#layer-{tile}-1");
                int disagree = 0, coloured = 0;
                for (int p = 0; p < labelReference.Length; p++)
                {
                    bool expected = labelReference[p] != 0;
                    if (expected) coloured++;
                    if (expected != (labelAlpha[p] == 255)) disagree++;
                }
                Assert.Equal(0, disagree);
                Assert.InRange(coloured, 1, labelReference.Length - 1); // some labels and some background on every plane
            }

            // The label number under the cursor, against SciPy's nearest voxel at the cursor's world position.
            var mm = (await page.Locator("#cursor-mm").TextContentAsync() ?? "").Split(',').Select(s => double.Parse(s, CultureInfo.InvariantCulture)).ToArray();
            var at = volume.Affine.Apply(25, 14, 11);
            Assert.Equal(at.X, mm[0], 0.006);
            var point = new ReslicePlane(new Vector3D(at.X, at.Y, at.Z), new Vector3D(1, 0, 0), new Vector3D(0, 1, 0), 1, 1, 0.01);
            var (label, _) = ResliceScipyTests.RunScipy(labels, point, fill: -1f, nearest: true);
            await page.WaitForFunctionAsync("() => document.getElementById('cursor-layer-1') !== null");
            var text = await page.Locator("#cursor-layer-1").TextContentAsync() ?? "";
            Assert.StartsWith($"label {label[0].ToString(CultureInfo.InvariantCulture)}", text);
            await session.ScreenshotAsync("viewer-overlays.png", output);
            session.AssertNoErrors();
        });
    }

    /// <summary>Writes <paramref name="main"/> as NIfTI, serves it (with <paramref name="options"/>) and opens Chromium on it.</summary>
    private static async Task WithViewerAsync(Volume main, ViewerOptions? options, Func<string, Volume, ViewerServer, Session, Task> body)
    {
        var folder = Directory.CreateTempSubdirectory("stackbuild-viewer-").FullName;
        try
        {
            var path = ResliceTestSupport.WriteNifti(main, folder);
            var volume = NiftiFile.Read(path).ToVolume();
            await using var server = await ViewerServer.StartAsync(volume, "phantom.nii.gz", IPAddress.Loopback, 0, options);
            await using var session = await Session.OpenAsync();
            await body(path, volume, server, session);
        }
        finally
        {
            Directory.Delete(folder, recursive: true);
        }
    }

    // ---- test volumes ----

    /// <summary>The reslice phantom's pattern on a grid of 40 µm cubes, so each axis plane's pixels are its voxels.</summary>
    private static Volume IsotropicPhantom(int nx, int ny, int nz)
    {
        var source = ResliceTestSupport.Phantom(nx, ny, nz);
        var volume = new Volume(nx, ny, nz, Affine.FromAxes(AxisCodes.Default, 0.04, 0.04, 0.04, nx, ny, nz, (0.3, -0.2, 0.5)));
        source.Voxels.CopyTo(volume.Voxels, 0);
        return volume;
    }

    /// <summary>
    /// An empty volume on a grid turned about the world S axis and tilted about R, centred near the phantom's centre
    /// plus <paramref name="shift"/> (mm).
    /// </summary>
    private static Volume OtherGrid(int nx, int ny, int nz, double si, double sj, double sk, double turnDeg, double tiltDeg, (double X, double Y, double Z) shift)
    {
        double a = turnDeg * Math.PI / 180, b = tiltDeg * Math.PI / 180;
        double[,] r =
        {
            { Math.Cos(a), -Math.Sin(a) * Math.Cos(b), Math.Sin(a) * Math.Sin(b) },
            { Math.Sin(a), Math.Cos(a) * Math.Cos(b), -Math.Cos(a) * Math.Sin(b) },
            { 0, Math.Sin(b), Math.Cos(b) },
        };
        double[] sizes = [si, sj, sk], centre = [0.3 + shift.X, -0.2 + shift.Y, 0.5 + shift.Z];
        double[] half = [(nx - 1) / 2.0, (ny - 1) / 2.0, (nz - 1) / 2.0];
        var rows = new double[3][];
        for (int row = 0; row < 3; row++)
        {
            rows[row] = [r[row, 0] * sizes[0], r[row, 1] * sizes[1], r[row, 2] * sizes[2], 0];
            rows[row][3] = centre[row] - (rows[row][0] * half[0] + rows[row][1] * half[1] + rows[row][2] * half[2]);
        }
        return new Volume(nx, ny, nz, Affine.FromRows(rows[0], rows[1], rows[2]));
    }

    // ---- page helpers ----

    private static async Task WaitUntilShownAsync(IPage page) =>
        await page.WaitForFunctionAsync(@"() => {
            const imgs = [...document.querySelectorAll('img.base, img.layer')].filter(i => !i.hidden);
            return imgs.length >= 4 && imgs.every(i => i.dataset.shown && i.dataset.shown === i.dataset.wanted && i.complete);
        }", null, new PageWaitForFunctionOptions { Timeout = 20000 });

    private static async Task<int[]> CursorAsync(IPage page) =>
        (await page.Locator("#cursor-voxel").TextContentAsync() ?? "").Split(',').Select(s => int.Parse(s.Trim(), CultureInfo.InvariantCulture)).ToArray();

    private static async Task<Dictionary<string, string>> ShownQueryAsync(IPage page, string selector)
    {
        var query = await page.Locator(selector).GetAttributeAsync("data-shown") ?? "";
        return query.Split('&').Select(p => p.Split('=')).ToDictionary(p => p[0], p => Uri.UnescapeDataString(p[1]));
    }

    private static async Task<JsonElement> GeometryAsync(IPage page, string tile) =>
        JsonDocument.Parse(await page.EvaluateAsync<string>($"() => JSON.stringify(view.tiles['{tile}'].geometry)")).RootElement.Clone();

    private static ReslicePlane PlaneOf(JsonElement g)
    {
        Vector3D V(string name) { var a = g.GetProperty(name).EnumerateArray().Select(e => e.GetDouble()).ToArray(); return new Vector3D(a[0], a[1], a[2]); }
        return new ReslicePlane(V("centreMm"), V("rightDirection"), V("downDirection"), g.GetProperty("width").GetInt32(),
            g.GetProperty("height").GetInt32(), g.GetProperty("pixelSizeMm").GetDouble());
    }

    /// <summary>The view as the page holds it: every image's request, the cursor, the chosen plane and the controls.</summary>
    private static Task<string> ViewStateAsync(IPage page) => page.EvaluateAsync<string>(@"() => JSON.stringify({
        shown: [...document.querySelectorAll('img.base')].map(i => i.dataset.shown),
        cursor: document.getElementById('cursor-voxel').textContent,
        active: document.querySelector('.tile.active').id,
        orientation: document.getElementById('orientation').value,
        nearest: document.getElementById('nearest').checked })");

    private static async Task ClickPixelAsync(IPage page, string tile, int x, int y)
    {
        var g = await GeometryAsync(page, tile);
        var box = (await page.Locator($"#plane-{tile}").BoundingBoxAsync())!;
        // Pixel centres: (x + 0.5) / width of the way across.
        await page.Mouse.ClickAsync((float)(box.X + (x + 0.5) / g.GetProperty("width").GetInt32() * box.Width),
            (float)(box.Y + (y + 0.5) / g.GetProperty("height").GetInt32() * box.Height));
    }

    /// <summary>The three axis planes the page shows, against nibabel array slices through the same voxel (tests/tools/nibabel_planes.py).</summary>
    private static async Task AssertAxisPlanesMatchNibabelAsync(IPage page, string path, int[] cursor, double low, double high)
    {
        string[] args = [path, .. cursor.Select(c => c.ToString(CultureInfo.InvariantCulture)),
            low.ToString(CultureInfo.InvariantCulture), high.ToString(CultureInfo.InvariantCulture)];
        var json = NiftiPython.Run("nibabel_planes.py", args);
        var expected = JsonDocument.Parse(json).RootElement;
        foreach (var tile in AxisTiles)
        {
            var e = expected.GetProperty(tile);
            var shown = await ShownPixelsAsync(page, $"#plane-{tile}");
            Assert.Equal((e.GetProperty("width").GetInt32(), e.GetProperty("height").GetInt32()), (shown.Width, shown.Height));
            var gray = e.GetProperty("gray").EnumerateArray().Select(v => v.GetInt32()).ToArray();
            int differing = gray.Where((v, p) => v != shown.Gray[p]).Count();
            Assert.True(differing == 0, $"{tile} plane through voxel {string.Join(",", cursor)}: {differing} pixels differ from nibabel's slice");
        }
    }

    /// <summary>A value mapped to 8-bit grey by a window, rounded half away from zero (as the viewer's PNGs are).</summary>
    private static int Gray8(double v, double low, double high) =>
        (int)Math.Clamp(Math.Round((v - low) * (255 / (high - low)), MidpointRounding.AwayFromZero), 0, 255);

    private sealed record Shown(int Width, int Height, int[] Gray, bool Grey);

    // The image as the page decoded it: drawn at its own size into a canvas and read back.
    private static async Task<Shown> ShownPixelsAsync(IPage page, string selector)
    {
        var e = await ReadImageAsync(page, selector);
        var d = e.Rgba;
        var gray = new int[e.Width * e.Height];
        bool grey = true;
        for (int p = 0; p < gray.Length; p++)
        {
            gray[p] = d[4 * p];
            if (d[4 * p + 1] != d[4 * p] || d[4 * p + 2] != d[4 * p]) grey = false;
        }
        return new Shown(e.Width, e.Height, gray, grey);
    }

    private static async Task<int[]> ShownAlphaAsync(IPage page, string selector)
    {
        var e = await ReadImageAsync(page, selector);
        return Enumerable.Range(0, e.Width * e.Height).Select(p => e.Rgba[4 * p + 3]).ToArray();
    }

    private static async Task<(int Width, int Height, int[] Rgba)> ReadImageAsync(IPage page, string selector)
    {
        var json = await page.EvaluateAsync<string>(@"(selector) => {
            const img = document.querySelector(selector);
            const c = document.createElement('canvas');
            c.width = img.naturalWidth; c.height = img.naturalHeight;
            const g = c.getContext('2d');
            g.drawImage(img, 0, 0);
            return JSON.stringify({ width: c.width, height: c.height, rgba: Array.from(g.getImageData(0, 0, c.width, c.height).data) });
        }", selector);
        var e = JsonDocument.Parse(json).RootElement;
        return (e.GetProperty("width").GetInt32(), e.GetProperty("height").GetInt32(), e.GetProperty("rgba").EnumerateArray().Select(v => v.GetInt32()).ToArray());
    }

    /// <summary>One headless Chromium with one page, collecting the page's errors.</summary>
    private sealed class Session : IAsyncDisposable
    {
        private IPlaywright _playwright = null!;
        private IBrowser _browser = null!;
        private readonly List<string> _errors = [];
        public IPage Page { get; private set; } = null!;

        public static async Task<Session> OpenAsync()
        {
            Assert.True(File.Exists(Chromium), $"{Chromium} is missing: install the Debian package chromium (apt-get install -y chromium); tests/run.sh does this as root");
            var s = new Session { _playwright = await Playwright.CreateAsync() };
            s._browser = await s._playwright.Chromium.LaunchAsync(new BrowserTypeLaunchOptions { ExecutablePath = Chromium, Args = ChromiumArgs, Headless = true });
            s.Page = await s.NewPageAsync();
            return s;
        }

        public async Task<IPage> NewPageAsync()
        {
            var page = await _browser.NewPageAsync(new BrowserNewPageOptions { ViewportSize = new ViewportSize { Width = 1400, Height = 900 } });
            page.PageError += (_, e) => _errors.Add(e);
            page.Console += (_, m) => { if (m.Type == "error") _errors.Add(m.Text); };
            return page;
        }

        public async Task ScreenshotAsync(string name, ITestOutputHelper output)
        {
            var artifacts = Path.Combine(AppContext.BaseDirectory, "artifacts");
            Directory.CreateDirectory(artifacts);
            var shot = Path.Combine(artifacts, name);
            await Page.ScreenshotAsync(new PageScreenshotOptions { Path = shot });
            output.WriteLine($"screenshot: {shot}");
        }

        public void AssertNoErrors() => Assert.True(_errors.Count == 0, "the page reported errors: " + string.Join(" | ", _errors));

        public async ValueTask DisposeAsync()
        {
            await _browser.DisposeAsync();
            _playwright.Dispose();
        }
    }
}
