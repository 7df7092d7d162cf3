using System.Net;
using System.Net.Sockets;
using System.Text;
using System.Text.Json;
using SixLabors.ImageSharp;
using SixLabors.ImageSharp.PixelFormats;
using StackBuild.Reslice;
using StackBuild.Viewer;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The viewer's HTTP surface: valid planes, strict refusals (400) and nothing served beyond its own page.</summary>
public sealed class ViewerApiTests : IAsyncLifetime
{
    private ViewerServer _server = null!;
    private readonly HttpClient _http = new();
    private const string Valid = "plane=section&tiltH=10&tiltV=-5&depth=0.1&low=0&high=255";

    public async Task InitializeAsync()
    {
        _server = await ViewerServer.StartAsync(ResliceTestSupport.Phantom(40, 32, 12), "phantom.nii.gz", IPAddress.Loopback, 0);
        _http.BaseAddress = _server.Url;
    }

    public async Task DisposeAsync()
    {
        _http.Dispose();
        await _server.DisposeAsync();
    }

    [Fact]
    public async Task AValidPlaneComesBackAsAGreyPngWithItsGeometry()
    {
        using var response = await _http.GetAsync("api/plane.png?" + Valid + "&sampling=nearest");
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        Assert.Equal("image/png", response.Content.Headers.ContentType?.MediaType);
        var geometry = JsonDocument.Parse(response.Headers.GetValues("X-Plane").Single()).RootElement;
        using var image = Image.Load<L8>(await response.Content.ReadAsByteArrayAsync());
        Assert.Equal(geometry.GetProperty("width").GetInt32(), image.Width);
        Assert.Equal(geometry.GetProperty("height").GetInt32(), image.Height);
        Assert.Equal("nearest", geometry.GetProperty("interpolation").GetString());
        Assert.Equal(4, geometry.GetProperty("corners").GetArrayLength());
        Assert.InRange(geometry.GetProperty("cutVoxel").GetArrayLength(), 3, 6);
        Assert.Equal(10, geometry.GetProperty("tiltAboutHorizontalDeg").GetDouble());

        var json = JsonDocument.Parse(await _http.GetStringAsync("api/plane?" + Valid)).RootElement;
        Assert.Equal(geometry.GetProperty("width").GetInt32(), json.GetProperty("width").GetInt32());
        var volume = JsonDocument.Parse(await _http.GetStringAsync("api/volume")).RootElement;
        Assert.Equal("phantom.nii.gz", volume.GetProperty("name").GetString());
        Assert.Equal([40, 32, 12], volume.GetProperty("dims").EnumerateArray().Select(e => e.GetInt32()));
    }

    [Theory]
    [InlineData("", "missing parameters")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=0&low=0", "missing parameter high")]
    [InlineData("plane=section&tiltH=91&tiltV=0&depth=0&low=0&high=1", "between")]
    [InlineData("plane=section&tiltH=0&tiltV=-90.5&depth=0&low=0&high=1", "between")]
    [InlineData("plane=section&tiltH=abc&tiltV=0&depth=0&low=0&high=1", "finite number")]
    [InlineData("plane=section&tiltH=NaN&tiltV=0&depth=0&low=0&high=1", "finite number")]
    [InlineData("plane=section&tiltH=0&tiltV=Infinity&depth=0&low=0&high=1", "finite number")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=1e999&low=0&high=1", "finite number")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=0&low=5&high=5", "greater than low")]
    [InlineData("plane=oblique&tiltH=0&tiltV=0&depth=0&low=0&high=1", "not a plane orientation")]
    [InlineData("plane=..%2F..%2Fetc%2Fpasswd&tiltH=0&tiltV=0&depth=0&low=0&high=1", "file path")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=0&low=0&high=1&path=%2Fetc%2Fpasswd", "unknown parameter")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=0&low=0&high=1&file=volume.nii", "unknown parameter")]
    [InlineData("plane=section&plane=ik&tiltH=0&tiltV=0&depth=0&low=0&high=1", "once")]
    [InlineData("plane=section&tiltH=0&tiltV=0&depth=0&low=0&high=1&sampling=cubic", "linear or nearest")]
    [InlineData("plane=C:%5Cwindows&tiltH=0&tiltV=0&depth=0&low=0&high=1", "file path")]
    public async Task BadPlaneRequestsAre400WithAReason(string query, string reason)
    {
        foreach (var endpoint in new[] { "api/plane.png", "api/plane" })
        {
            using var response = await _http.GetAsync(endpoint + "?" + query);
            Assert.Equal(HttpStatusCode.BadRequest, response.StatusCode);
            var text = await response.Content.ReadAsStringAsync();
            Assert.Contains(reason, text);
            Assert.Single(text.TrimEnd().Split('\n'));
        }
    }

    [Fact]
    public async Task OverlayAndProbeRequestsAreCheckedToo()
    {
        // This viewer has no overlays: asking for one says how to start it with one.
        using var none = await _http.GetAsync("api/overlay.png?" + Valid + "&layer=0");
        Assert.Equal(HttpStatusCode.BadRequest, none.StatusCode);
        Assert.Contains("--overlay", await none.Content.ReadAsStringAsync());
        foreach (var bad in new[] { "x=1&y=2", "x=1&y=2&z=abc", "x=1&y=2&z=3&path=%2Fetc%2Fpasswd", "x=1&x=2&y=2&z=3" })
        {
            using var response = await _http.GetAsync("api/probe?" + bad);
            Assert.Equal(HttpStatusCode.BadRequest, response.StatusCode);
            Assert.Single((await response.Content.ReadAsStringAsync()).TrimEnd().Split('\n'));
        }
        // The value at a voxel centre's world position is that voxel's value (Phantom's affine: 20 × 20 × 50 µm, RIP).
        var phantom = ResliceTestSupport.Phantom(40, 32, 12);
        var (x, y, z) = phantom.Affine.Apply(7, 11, 5);
        var probe = JsonDocument.Parse(await _http.GetStringAsync(FormattableString.Invariant($"api/probe?x={x}&y={y}&z={z}"))).RootElement;
        Assert.Equal(phantom[7, 11, 5], probe.GetProperty("value").GetDouble());
        Assert.Equal([7.0, 11.0, 5.0], probe.GetProperty("voxel").EnumerateArray().Select(e => Math.Round(e.GetDouble(), 9)));
    }

    [Theory]
    [InlineData("/../../etc/passwd")]
    [InlineData("/%2e%2e/%2e%2e/etc/passwd")]
    [InlineData("/..%2f..%2fetc%2fpasswd")]
    [InlineData("/api/file?path=/etc/passwd")]
    [InlineData("/api/file?path=")]
    [InlineData("/api/../../../../etc/passwd")]
    [InlineData("/viewer.js/../../../../etc/passwd")]
    [InlineData("/etc/passwd")]
    [InlineData("/index.html")]
    [InlineData("/Assets/viewer.js")]
    [InlineData("/StackBuild.Viewer.dll")]
    [InlineData("/phantom.nii.gz")]
    [InlineData("/viewer.js?path=/etc/passwd")]
    public async Task NothingButThePageAndTheApiIsServed(string rawTarget)
    {
        // A raw request, so no client library tidies the path first.
        var (status, body) = await RawGetAsync(rawTarget, $"127.0.0.1:{_server.Url.Port}");
        Assert.True(status is 400 or 404, $"{rawTarget} answered {status}");
        Assert.DoesNotContain("root:", body);
        Assert.DoesNotContain("MZ", body[..Math.Min(body.Length, 2)]);
    }

    [Fact]
    public async Task ThePageAssetsAreServedWithAStrictContentPolicy()
    {
        foreach (var (path, type) in new[] { ("/", "text/html"), ("/viewer.js", "text/javascript"), ("/viewer.css", "text/css"), ("/favicon.svg", "image/svg+xml") })
        {
            using var response = await _http.GetAsync(path.TrimStart('/'));
            Assert.Equal(HttpStatusCode.OK, response.StatusCode);
            Assert.Equal(type, response.Content.Headers.ContentType?.MediaType);
            Assert.Contains("default-src 'none'", response.Headers.GetValues("Content-Security-Policy").Single());
        }
    }

    [Fact]
    public async Task OtherHostNamesAreRefused()
    {
        // A page on another site that points a host name at 127.0.0.1 must not be able to read the volume.
        var (status, _) = await RawGetAsync("/api/volume", "attacker.example");
        Assert.Equal(400, status);
        var (ok, _) = await RawGetAsync("/api/volume", $"localhost:{_server.Url.Port}");
        Assert.Equal(200, ok);
    }

    private async Task<(int Status, string Body)> RawGetAsync(string target, string host)
    {
        using var client = new TcpClient();
        await client.ConnectAsync(IPAddress.Loopback, _server.Url.Port);
        await using var stream = client.GetStream();
        var request = Encoding.ASCII.GetBytes($"GET {target} HTTP/1.1\r\nHost: {host}\r\nConnection: close\r\n\r\n");
        await stream.WriteAsync(request);
        using var reader = new StreamReader(stream, Encoding.Latin1);
        var text = await reader.ReadToEndAsync();
        var statusLine = text.Split("\r\n")[0];
        var body = text.Contains("\r\n\r\n") ? text[(text.IndexOf("\r\n\r\n", StringComparison.Ordinal) + 4)..] : "";
        return (int.Parse(statusLine.Split(' ')[1]), body);
    }
}
