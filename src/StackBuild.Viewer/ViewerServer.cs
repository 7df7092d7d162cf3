using System.Net;
using System.Reflection;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.AspNetCore.Http;
using Microsoft.AspNetCore.Server.Kestrel.Core;
using Microsoft.AspNetCore.Server.Kestrel.Transport.Sockets;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;
using StackBuild.Imaging;
using StackBuild.Reslice;

namespace StackBuild.Viewer;

/// <summary>
/// A small web server that shows one volume, resliced at any angle, in a browser. It serves only its own page
/// assets compiled into this assembly and an API computed from the one volume it was given; nothing else, and
/// never a file from disk.
/// </summary>
public sealed class ViewerServer : IAsyncDisposable
{
    private readonly WebApplication _app;

    /// <summary>The address the page is served at (with the real port when 0 was asked for).</summary>
    public Uri Url { get; }

    private ViewerServer(WebApplication app, Uri url)
    {
        _app = app;
        Url = url;
    }

    /// <summary>
    /// Prepares the volume (a compact copy for fast reslicing, the default window), binds to
    /// <paramref name="address"/>:<paramref name="port"/> (0 = any free port) and starts serving.
    /// </summary>
    /// <param name="name">Shown on the page (a file name, not a path).</param>
    /// <param name="options">Overlays and the series' sections, if any.</param>
    public static async Task<ViewerServer> StartAsync(Volume volume, string name, IPAddress address, int port, ViewerOptions? options = null, CancellationToken cancellation = default)
    {
        var state = new ViewerVolume(volume, name, options);
        // The empty builder reads no configuration files or environment variables and adds no middleware.
        var builder = WebApplication.CreateEmptyBuilder(new WebApplicationOptions { ApplicationName = "StackBuild.Viewer" });
        builder.Logging.ClearProviders();
        builder.WebHost.UseKestrelCore();
        // Each connection's kernel send buffer is fixed (a connection takes it from the listening socket): by default Linux
        // grows it to 4 MB, enough to take a whole plane off Kestrel's hands for a client that reads nothing, which the
        // kernel then keeps, at most 4 MB a connection, for as long as that client stays. Fixed, it bounds that memory and
        // leaves a stalled client's answer with Kestrel, whose MinResponseDataRate then cuts it off.
        builder.WebHost.UseSockets(sockets => sockets.CreateBoundListenSocket = endpoint =>
        {
            var listener = SocketTransportOptions.CreateDefaultBoundListenSocket(endpoint);
            listener.SendBufferSize = SendBufferBytes;
            return listener;
        });
        builder.WebHost.ConfigureKestrel(k =>
        {
            k.AddServerHeader = false;
            // The page's own requests are a few hundred bytes with no body; anything much larger is refused by Kestrel
            // before it reaches the viewer (README, "The viewer's limits"): a longer request line with 414, a larger
            // header block or more header lines with 431.
            k.Limits.MaxRequestLineSize = MaxRequestLineBytes;
            k.Limits.MaxRequestHeadersTotalSize = MaxRequestHeaderBytes;
            k.Limits.MaxRequestHeaderCount = MaxRequestHeaderCount;
            k.Limits.MaxRequestBodySize = 0;
            // Slow and silent clients (README, "The viewer's limits"). Kestrel serves every connection asynchronously, so
            // a client that stalls holds no thread; what it holds is its connection and, while an answer is being
            // written, that answer (the PNG, up to a few MB) and at most MaxResponseBufferBytes of Kestrel's buffer.
            // These limits bound how long, and how many at once.
            k.Limits.MinResponseDataRate = new MinDataRate(MinResponseBytesPerSecond, MinResponseGrace);
            k.Limits.MaxResponseBufferSize = MaxResponseBufferBytes;
            k.Limits.RequestHeadersTimeout = RequestHeadersTimeout;
            k.Limits.KeepAliveTimeout = KeepAliveTimeout;
            k.Limits.MaxConcurrentConnections = MaxConnections;
            k.Listen(address, port);
        });
        builder.Services.AddRoutingCore();
        var app = builder.Build();
        app.Use(async (context, next) =>
        {
            context.Response.Headers.XContentTypeOptions = "nosniff";
            context.Response.Headers.CacheControl = "no-store";
            context.Response.Headers.ContentSecurityPolicy =
                "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' blob:; connect-src 'self'; base-uri 'none'; form-action 'none'";
            context.Response.Headers["Referrer-Policy"] = "no-referrer";
            if (!HttpMethods.IsGet(context.Request.Method))
            {
                context.Response.Headers.Allow = "GET";
                await Problem(context, StatusCodes.Status405MethodNotAllowed, $"this viewer answers only GET requests, not {Printable(context.Request.Method)}");
                return;
            }
            if (context.Request.ContentLength > 0 || context.Request.Headers.TransferEncoding.Count > 0)
            {
                // Refused before the body is read; Kestrel closes the connection rather than read what was sent.
                await Problem(context, StatusCodes.Status413PayloadTooLarge, "this viewer's requests take no body; send the parameters in the query string");
                return;
            }
            if (IPAddress.IsLoopback(address) && !IsLoopbackHost(context.Request.Host))
            {
                // A page elsewhere cannot reach this server through a made-up host name (DNS rebinding).
                await Problem(context, StatusCodes.Status400BadRequest, "this viewer answers only to localhost addresses");
                return;
            }
            await next(context);
        });
        app.UseRouting();
        MapAssets(app);
        ViewerApi.Map(app, state);
        app.MapFallback(context => Problem(context, StatusCodes.Status404NotFound, "not found: this viewer serves only its page and /api/volume, /api/plane, /api/plane.png, /api/overlay.png, /api/probe"));
        await app.StartAsync(cancellation);
        var addresses = app.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()?.Addresses;
        var bound = addresses?.FirstOrDefault() ?? throw new InvalidOperationException("The viewer did not report the address it listens on.");
        return new ViewerServer(app, new Uri(bound.Replace("[::]", "localhost").Replace("0.0.0.0", "localhost") + "/"));
    }

    /// <summary>Completes when the server has stopped (after <paramref name="cancellation"/> fires or on dispose).</summary>
    public Task WaitForShutdownAsync(CancellationToken cancellation) => _app.WaitForShutdownAsync(cancellation);

    public async ValueTask DisposeAsync()
    {
        await _app.StopAsync();
        await _app.DisposeAsync();
    }

    /// <summary>Longest request line (method, path with query, version) the viewer reads, in bytes; longer is 414.</summary>
    public const int MaxRequestLineBytes = 8 * 1024;

    /// <summary>Largest header block the viewer reads, in bytes; larger is 431 (Kestrel's own default, made explicit).</summary>
    public const int MaxRequestHeaderBytes = 32 * 1024;

    /// <summary>Most header lines the viewer reads; more is 431 (Kestrel's own default, made explicit).</summary>
    public const int MaxRequestHeaderCount = 100;

    /// <summary>
    /// Slowest a client may take an answer, averaged over the answer, after <see cref="MinResponseGrace"/>; a slower
    /// one is disconnected and the answer it held is let go. 100 KB/s is 0.8 Mbit/s: the viewer is for this computer
    /// (loopback) or a local network, where a plane arrives at tens of MB/s, so only a client that has stopped reading is
    /// caught. (Kestrel's default, 240 B/s, is for servers on the internet; at that rate a stalled client would hold a
    /// 2 MB plane for over two hours.)
    /// </summary>
    public const int MinResponseBytesPerSecond = 100 * 1024;

    /// <summary>
    /// Kernel send buffer of each connection, in bytes (Linux keeps twice this for its own bookkeeping). 256 KB in flight is
    /// plenty for a local network (at a 10 ms round trip it allows 25 MB/s) and keeps a stalled client's share of kernel
    /// memory at 512 KB instead of up to 4 MB.
    /// </summary>
    public const int SendBufferBytes = 256 * 1024;

    /// <summary>Time a client is given before <see cref="MinResponseBytesPerSecond"/> applies (Kestrel's default).</summary>
    public static readonly TimeSpan MinResponseGrace = TimeSpan.FromSeconds(5);

    /// <summary>
    /// Most of an answer Kestrel keeps for a client that is not reading before the writer waits (its default, made
    /// explicit): a stalled client costs this buffer and the one answer being written, never more.
    /// </summary>
    public const int MaxResponseBufferBytes = 64 * 1024;

    /// <summary>
    /// Time a client has to send its request line and headers (Kestrel: 30 s). The page's requests are a few hundred bytes
    /// sent at once; a client that sends them a byte at a time to keep a connection open is cut off after 10 s.
    /// </summary>
    public static readonly TimeSpan RequestHeadersTimeout = TimeSpan.FromSeconds(10);

    /// <summary>
    /// Time an idle connection is kept open for the next request (Kestrel: 130 s). The page asks for planes while it is used
    /// and a browser opens a new connection at once when needed, so idle connections are let go after 30 s.
    /// </summary>
    public static readonly TimeSpan KeepAliveTimeout = TimeSpan.FromSeconds(30);

    /// <summary>
    /// Most connections open at once (Kestrel: no limit); more are closed as they arrive. A browser opens at most six to
    /// one server, so this is room for many pages; it bounds what stalled clients can hold together (each at most one
    /// answer and <see cref="MaxResponseBufferBytes"/>) until <see cref="MinResponseBytesPerSecond"/> lets them go.
    /// </summary>
    public const int MaxConnections = 200;

    private static string Printable(string text) => text.Length <= 20 && text.All(c => c is > ' ' and < (char)127) ? text : "that method";

    private static bool IsLoopbackHost(HostString host) =>
        host.Host is "localhost" or "127.0.0.1" or "[::1]" || host.Host.StartsWith("127.", StringComparison.Ordinal);

    internal static Task Problem(HttpContext context, int status, string message)
    {
        context.Response.StatusCode = status;
        context.Response.ContentType = "text/plain; charset=utf-8";
        return context.Response.WriteAsync(message + "\n");
    }

    // The page's own files, by fixed name: no path from the request ever reaches a file or resource lookup.
    private static readonly (string Route, string Resource, string ContentType)[] Assets =
    [
        ("/", "index.html", "text/html; charset=utf-8"),
        ("/viewer.css", "viewer.css", "text/css; charset=utf-8"),
        ("/viewer.js", "viewer.js", "text/javascript; charset=utf-8"),
        ("/favicon.svg", "favicon.svg", "image/svg+xml"),
    ];

    private static void MapAssets(WebApplication app)
    {
        var assembly = Assembly.GetExecutingAssembly();
        foreach (var (route, resource, type) in Assets)
        {
            using var stream = assembly.GetManifestResourceStream("StackBuild.Viewer.Assets." + resource)
                ?? throw new InvalidOperationException($"The viewer's page asset {resource} is missing from the build.");
            using var memory = new MemoryStream();
            stream.CopyTo(memory);
            var bytes = memory.ToArray();
            app.MapGet(route, (HttpContext context) =>
            {
                if (context.Request.QueryString.HasValue)
                    return Problem(context, StatusCodes.Status400BadRequest, "page assets take no query parameters");
                context.Response.ContentType = type;
                return context.Response.Body.WriteAsync(bytes).AsTask();
            });
        }
    }
}
