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

    /// <summary>Oversized and malformed requests, sent raw: each is refused with the 4xx of README's "The viewer's limits".</summary>
    [Theory]
    [InlineData("100 KB query string", 414)]
    [InlineData("request line just over 8 KB", 414)]
    [InlineData("header block over 32 KB", 431)]
    [InlineData("101 header lines", 431)]
    [InlineData("method with a character outside a token", 400)]
    [InlineData("bytes that are not HTTP", 400)]
    [InlineData("POST", 405)]
    [InlineData("made-up method", 405)]
    [InlineData("HEAD", 405)]
    [InlineData("GET with a 5-byte body", 413)]
    [InlineData("GET declaring a 50 MB body", 413)]
    [InlineData("GET with a chunked body", 413)]
    public async Task OversizedAndMalformedRequestsAreRefusedWith4xx(string kind, int expected)
    {
        var host = $"Host: 127.0.0.1:{_server.Url.Port}\r\n";
        const string plane = "/api/plane.png?" + Valid;
        var request = kind switch
        {
            "100 KB query string" => $"GET {plane}&pad={new string('a', 100_000)} HTTP/1.1\r\n{host}\r\n",
            "request line just over 8 KB" => $"GET {plane}&pad={new string('a', ViewerServer.MaxRequestLineBytes)} HTTP/1.1\r\n{host}\r\n",
            "header block over 32 KB" => $"GET {plane} HTTP/1.1\r\n{host}{string.Concat(Enumerable.Range(0, 40).Select(n => $"X-Pad-{n}: {new string('b', 1000)}\r\n"))}\r\n",
            "101 header lines" => $"GET {plane} HTTP/1.1\r\n{host}{string.Concat(Enumerable.Range(0, 100).Select(n => $"X-Pad-{n}: b\r\n"))}\r\n",
            "method with a character outside a token" => $"G@T {plane} HTTP/1.1\r\n{host}\r\n",
            "bytes that are not HTTP" => "\u0001\u0002hello\r\n\r\n",
            "POST" => $"POST {plane} HTTP/1.1\r\n{host}Content-Length: 0\r\n\r\n",
            "made-up method" => $"FETCH {plane} HTTP/1.1\r\n{host}\r\n",
            "HEAD" => $"HEAD {plane} HTTP/1.1\r\n{host}\r\n",
            "GET with a 5-byte body" => $"GET {plane} HTTP/1.1\r\n{host}Content-Length: 5\r\n\r\nhello",
            "GET declaring a 50 MB body" => $"GET {plane} HTTP/1.1\r\n{host}Content-Length: 50000000\r\n\r\nhello",
            "GET with a chunked body" => $"GET {plane} HTTP/1.1\r\n{host}Transfer-Encoding: chunked\r\n\r\n5\r\nhello\r\n0\r\n\r\n",
            _ => throw new ArgumentException(kind),
        };
        var (status, _) = await RawAsync(request);
        Assert.Equal(expected, status);
        // The server is unharmed: the same plane, asked properly, still comes back.
        using var ok = await _http.GetAsync(plane.TrimStart('/'));
        Assert.Equal(HttpStatusCode.OK, ok.StatusCode);
    }

    [Fact]
    public async Task RequestsJustInsideTheLimitsAreServed()
    {
        // A request line of exactly 8 KB less a little, 99 header lines, a 20 KB header block: served (the pad parameter
        // is then refused by the viewer itself, with its own 400, which shows the request got through Kestrel).
        var host = $"Host: 127.0.0.1:{_server.Url.Port}\r\n";
        const string plane = "/api/plane.png?" + Valid;
        var pad = new string('a', ViewerServer.MaxRequestLineBytes - 200 - plane.Length);
        Assert.Equal(400, (await RawAsync($"GET {plane}&pad={pad} HTTP/1.1\r\n{host}\r\n")).Status);
        Assert.Equal(200, (await RawAsync($"GET {plane} HTTP/1.1\r\n{host}{string.Concat(Enumerable.Range(0, 98).Select(n => $"X-Pad-{n}: b\r\n"))}\r\n")).Status);
        Assert.Equal(200, (await RawAsync($"GET {plane} HTTP/1.1\r\n{host}{string.Concat(Enumerable.Range(0, 20).Select(n => $"X-Pad-{n}: {new string('b', 1000)}\r\n"))}\r\n")).Status);
        Assert.Equal(200, (await RawAsync($"GET {plane} HTTP/1.1\r\n{host}Content-Length: 0\r\n\r\n")).Status);
    }

    private Task<(int Status, string Body)> RawGetAsync(string target, string host) =>
        RawAsync($"GET {target} HTTP/1.1\r\nHost: {host}\r\nConnection: close\r\n\r\n");

    /// <summary>
    /// Sends <paramref name="request"/> as it is (with <c>Connection: close</c> added after its first line when it has none)
    /// and reads the answer until the server closes the connection.
    /// </summary>
    private async Task<(int Status, string Body)> RawAsync(string request)
    {
        int firstLineEnd = request.IndexOf("\r\n", StringComparison.Ordinal);
        if (firstLineEnd > 0 && !request.Contains("Connection: close", StringComparison.Ordinal))
            request = request.Insert(firstLineEnd + 2, "Connection: close\r\n");
        using var client = new TcpClient();
        await client.ConnectAsync(IPAddress.Loopback, _server.Url.Port);
        await using var stream = client.GetStream();
        await stream.WriteAsync(Encoding.Latin1.GetBytes(request));
        using var reader = new StreamReader(stream, Encoding.Latin1);
        using var limit = new CancellationTokenSource(TimeSpan.FromSeconds(30));
        var text = await reader.ReadToEndAsync(limit.Token);
        var statusLine = text.Split("\r\n")[0];
        var body = text.Contains("\r\n\r\n") ? text[(text.IndexOf("\r\n\r\n", StringComparison.Ordinal) + 4)..] : "";
        return (int.Parse(statusLine.Split(' ')[1]), body);
    }
}
