using System.Diagnostics;
using System.Globalization;
using System.Net;
using System.Net.Sockets;
using System.Text;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Viewer;
using Xunit;
using Xunit.Abstractions;

namespace StackBuild.Tests;

/// <summary>
/// Clients that take a large answer very slowly or not at all, and one that sends its headers a byte at a time, while a
/// normal client asks for planes: the normal client is served, byte for byte, while they stall; the server cuts each slow
/// one off (ViewerServer's limits: MinResponseBytesPerSecond after MinResponseGrace, RequestHeadersTimeout) instead of
/// holding it, and the memory their answers held is let go. Runs in the load test's collection: it measures this
/// process's memory too.
/// </summary>
[Collection(ViewerLoadCollection.Name)]
public sealed class ViewerSlowClientTests(ITestOutputHelper output)
{
    private const int Silent = 4, Trickling = 4, SlowHeaders = 2, Rounds = 4;
    /// <summary>How long any one client may take before the test calls it a hang (not a measure of speed).</summary>
    private static readonly TimeSpan HangGuard = TimeSpan.FromSeconds(120);

    [Fact]
    public async Task SlowClientsAreCutOffAndANormalClientIsServedMeanwhile()
    {
        // A plane of 1024 × 1024 voxels of noise: an 8-bit PNG of about 1 MB that does not compress, far more than the
        // few KB the slow clients' receive buffers hold.
        const int side = 1024;
        var volume = new Volume(side, side, 2, Affine.FromAxes(AxisCodes.Default, 0.02, 0.02, 0.05, side, side, 2, (0, 0, 0)));
        var random = new Random(18);
        for (int i = 0; i < volume.Voxels.Length; i++) volume.Voxels[i] = random.Next(256);
        await using var server = await ViewerServer.StartAsync(volume, "noise.nii.gz", IPAddress.Loopback, 0);
        int port = server.Url.Port;
        const string plane = "/api/plane.png?plane=section&tiltH=0&tiltV=0&depth=0&low=0&high=255&sampling=nearest";

        using var http = new HttpClient { BaseAddress = server.Url, Timeout = HangGuard };
        var reference = await http.GetByteArrayAsync(plane);
        Assert.True(reference.Length > 900_000, $"the plane's PNG is only {reference.Length} bytes");
        // Four rounds of the same slow clients. The pools that keep buffers for reuse (Kestrel's, the shared array pool's
        // per-thread buckets, the PNG encoder's) grow over the first rounds to serve that many answers at once, and then
        // stay; what a stalled client held, were it kept, would add its answer (about 1 MB) to every round. Measured
        // (2026-12-04, five rounds): 20.3 MB before, then 31.9, 41.1, 40.2, 40.2, 35.5 MB after each round.
        var heapAfter = new List<long> { GC.GetTotalMemory(forceFullCollection: true) };
        for (int round = 1; round <= Rounds; round++)
            heapAfter.Add(await StallRound(round, port, plane, http, reference));
        output.WriteLine($"managed heap after full GC, MB: before {heapAfter[0] / 1e6:0.0}, after each round " +
                         string.Join(", ", heapAfter.Skip(1).Select(h => (h / 1e6).ToString("0.0", CultureInfo.InvariantCulture))));
        long settled = heapAfter.Skip(1).Take(2).Max();
        foreach (var (after, round) in heapAfter.Skip(3).Select((h, i) => (h, i + 3)))
            Assert.True(after - settled < 4_000_000, $"the heap after round {round} is {(after - settled) / 1e6:0.0} MB above its most after rounds 1–2: " +
                $"{Silent + Trickling} stalled answers of {reference.Length / 1e6:0.0} MB each round are being kept");
        Assert.Equal(reference, await http.GetByteArrayAsync(plane)); // and still served afterwards
    }

    /// <summary>One round of slow clients beside a normal one, checked; returns the managed heap after a full collection at its end.</summary>
    private async Task<long> StallRound(int round, int port, string plane, HttpClient http, byte[] reference)
    {
        int threadsBefore = ThreadPool.ThreadCount;
        var clock = Stopwatch.StartNew();
        var silent = await Task.WhenAll(Enumerable.Range(0, Silent).Select(_ => Connect(port, plane)));
        var trickling = await Task.WhenAll(Enumerable.Range(0, Trickling).Select(_ => Connect(port, plane)));
        var trickles = trickling.Select(socket => Task.Run(() => Trickle(socket, clock))).ToArray();
        var slowHeaders = Enumerable.Range(0, SlowHeaders).Select(_ => Task.Run(() => HeadersByteBySecond(port, plane, clock))).ToArray();

        // While they stall (each answer already started), the normal client: the same large plane and the page's setup.
        await Task.Delay(TimeSpan.FromSeconds(2));
        long heapDuring = GC.GetTotalMemory(forceFullCollection: true);
        int threadsDuring = ThreadPool.ThreadCount;
        var served = Stopwatch.StartNew();
        var during = await http.GetByteArrayAsync(plane);
        Assert.Equal(HttpStatusCode.OK, (await http.GetAsync("api/volume")).StatusCode);
        output.WriteLine($"round {round}: normal client during the stall: {during.Length:N0} bytes in {served.Elapsed.TotalSeconds:0.00} s; " +
                         $"heap during the stall {heapDuring / 1e6:0.0} MB; thread pool threads {threadsBefore} before, {threadsDuring} during");
        Assert.True(during.AsSpan().SequenceEqual(reference), "the plane came back other than before the slow clients");

        // Each trickling client is cut off before it has the whole answer (fewer bytes than the PNG alone).
        foreach (var (received, endedAt, how) in await Task.WhenAll(trickles))
        {
            output.WriteLine($"round {round}: trickling client: {received:N0} bytes, then {how} at {endedAt.TotalSeconds:0.0} s");
            Assert.True(received < reference.Length, $"a trickling client got the whole answer ({received} bytes)");
        }
        // A silent client: read now, as fast as possible, whatever the server let through before it gave up; the answer is
        // incomplete and the connection ends.
        foreach (var socket in silent)
        {
            var (received, endedAt, how) = await DrainAsync(socket, clock);
            output.WriteLine($"round {round}: silent client, read at the end: {received:N0} bytes, then {how} at {endedAt.TotalSeconds:0.0} s");
            Assert.True(received < reference.Length, $"a silent client got the whole answer ({received} bytes): the server never cut it off");
        }
        foreach (var (sent, endedAt, answer) in await Task.WhenAll(slowHeaders))
        {
            output.WriteLine($"round {round}: headers a byte a second: {sent} bytes sent, connection ended at {endedAt.TotalSeconds:0.0} s; answer: {answer}");
            Assert.True(endedAt < ViewerServer.RequestHeadersTimeout + TimeSpan.FromSeconds(10), "a client sending its headers slowly was not cut off");
        }
        return GC.GetTotalMemory(forceFullCollection: true);
    }

    /// <summary>A connection with a small receive buffer (a few KB on the wire at a time) that has sent <paramref name="target"/>'s request.</summary>
    private static async Task<Socket> Connect(int port, string target)
    {
        var socket = new Socket(AddressFamily.InterNetwork, SocketType.Stream, ProtocolType.Tcp) { ReceiveBufferSize = 4096 };
        await socket.ConnectAsync(IPAddress.Loopback, port);
        await socket.SendAsync(Encoding.ASCII.GetBytes($"GET {target} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n\r\n"));
        return socket;
    }

    /// <summary>Reads 64 bytes every 100 ms (640 B/s) until the server ends the connection; how many bytes it got, when and how it ended.</summary>
    private static async Task<(long Received, TimeSpan EndedAt, string How)> Trickle(Socket socket, Stopwatch clock)
    {
        using (socket)
        {
            var buffer = new byte[64];
            long received = 0;
            while (clock.Elapsed < HangGuard)
            {
                try
                {
                    int n = await socket.ReceiveAsync(buffer);
                    if (n == 0) return (received, clock.Elapsed, "closed by the server");
                    received += n;
                }
                catch (SocketException e) { return (received, clock.Elapsed, $"reset by the server ({e.SocketErrorCode})"); }
                await Task.Delay(100);
            }
            return (received, clock.Elapsed, "still open at the hang guard");
        }
    }

    /// <summary>Reads everything the connection still gives until it ends (or the hang guard).</summary>
    private static async Task<(long Received, TimeSpan EndedAt, string How)> DrainAsync(Socket socket, Stopwatch clock)
    {
        using (socket)
        {
            var buffer = new byte[65536];
            long received = 0;
            using var guard = new CancellationTokenSource(HangGuard > clock.Elapsed ? HangGuard - clock.Elapsed : TimeSpan.Zero);
            try
            {
                while (true)
                {
                    int n = await socket.ReceiveAsync(buffer, SocketFlags.None, guard.Token);
                    if (n == 0) return (received, clock.Elapsed, "closed by the server");
                    received += n;
                }
            }
            catch (SocketException e) { return (received, clock.Elapsed, $"reset by the server ({e.SocketErrorCode})"); }
            catch (OperationCanceledException) { return (received, clock.Elapsed, "still open at the hang guard"); }
        }
    }

    /// <summary>Sends a request's bytes one a second until the server closes the connection; how many it sent, when, and the status line it answered, if any.</summary>
    private static async Task<(int Sent, TimeSpan EndedAt, string Answer)> HeadersByteBySecond(int port, string target, Stopwatch clock)
    {
        using var socket = new Socket(AddressFamily.InterNetwork, SocketType.Stream, ProtocolType.Tcp);
        await socket.ConnectAsync(IPAddress.Loopback, port);
        var request = Encoding.ASCII.GetBytes($"GET {target} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nX-Slow: {new string('a', 200)}\r\n\r\n");
        int sent = 0;
        var answer = new byte[256];
        var pending = socket.ReceiveAsync(answer, SocketFlags.None);
        try
        {
            while (sent < request.Length && clock.Elapsed < HangGuard)
            {
                if (pending.IsCompleted) break;
                await socket.SendAsync(request.AsMemory(sent, 1));
                sent++;
                await Task.WhenAny(pending, Task.Delay(1000));
            }
            int n = await pending.WaitAsync(HangGuard);
            var text = Encoding.ASCII.GetString(answer, 0, n);
            return (sent, clock.Elapsed, n == 0 ? "none (closed)" : text.Split("\r\n")[0]);
        }
        catch (SocketException e) { return (sent, clock.Elapsed, $"none (reset: {e.SocketErrorCode})"); }
    }
}
