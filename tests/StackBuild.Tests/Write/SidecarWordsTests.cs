using System.Text.Json;
using StackBuild.Imaging;
using StackBuild.Pipeline;
using StackBuild.Render;
using StackBuild.Solve;
using Xunit;

namespace StackBuild.Tests;

/// <summary>The sidecar's words for statuses and routes, and its run parameters, written and read back.</summary>
public sealed class SidecarWordsTests
{
    [Theory]
    [InlineData(SectionOutcome.Placed, "placed")]
    [InlineData(SectionOutcome.Aligned, "aligned")]
    [InlineData(SectionOutcome.Gap, "gap")]
    [InlineData(SectionOutcome.Excluded, "excluded")]
    [InlineData(SectionOutcome.Failed, "failed")]
    public void StatusIsWrittenAsItsWordAndReadBack(SectionOutcome status, string word) =>
        Assert.Equal(status, WrittenAndRead(new SectionRecord { Status = status }, "status", word).Status);

    [Theory]
    [InlineData(LinkRoute.Reference, "reference")]
    [InlineData(LinkRoute.Neighbour, "neighbour")]
    [InlineData(LinkRoute.SecondNeighbour, "second-neighbour")]
    [InlineData(LinkRoute.Distant, "distant")]
    [InlineData(LinkRoute.Failed, "failed")]
    [InlineData(LinkRoute.Template, "template")]
    [InlineData(LinkRoute.PartReference, "part-reference")]
    public void RouteIsWrittenAsItsWordAndReadBack(LinkRoute route, string word) =>
        Assert.Equal(route, WrittenAndRead(new SectionRecord { Route = route }, "route", word).Route);

    /// <summary>The record through its JSON, after checking that <paramref name="key"/> was written as <paramref name="word"/>.</summary>
    private static SectionRecord WrittenAndRead(SectionRecord record, string key, string word)
    {
        var json = JsonSerializer.Serialize(record);
        Assert.Contains($"\"{key}\":\"{word}\"", json);
        return JsonSerializer.Deserialize<SectionRecord>(json)!;
    }

    [Fact]
    public void AnUnknownStatusIsRefused()
    {
        var e = Assert.Throws<JsonException>(() => JsonSerializer.Deserialize<SectionRecord>("{\"status\":\"lost\"}"));
        Assert.Contains("lost", e.Message);
    }

    [Fact]
    public void RunParametersSurviveTheSidecar()
    {
        var parameters = new RunParameters
        {
            OutputPixelSizeUm = 12.5, RegistrationPixelSizeUm = 25, Interpolation = Interpolation.Bicubic, Channel = GrayChannel.Green,
            Aligned = true, WorkSizePx = 512, MinConfidence = 0.3, Fft = "managed", SmoothingStrength = 0, Fill = GapFill.Linear,
            PlaneResampling = new PlaneResampling(GapFill.Linear, 50, 40), Template = true, RouteClosure = new RouteClosure(0.346, 0.323, 0.01),
        };
        var json = JsonSerializer.Serialize(new BuildRecord { Parameters = parameters });
        // The text people read, as the sidecar has always held it.
        Assert.Contains("\"z_resampling\":\"linear, 50 \\u00B5m \\u2192 40 \\u00B5m\"", json);
        Assert.Contains("\"route_closure_slow_share\":\"0.346, limit 0.323\"", json);
        Assert.Equal(parameters, JsonSerializer.Deserialize<BuildRecord>(json)!.Parameters);

        var chain = new RunParameters { Aligned = false, Fill = GapFill.None };
        var read = JsonSerializer.Deserialize<BuildRecord>(JsonSerializer.Serialize(new BuildRecord { Parameters = chain }))!.Parameters;
        Assert.Equal(chain, read);
        Assert.Null(read.SmoothingStrength);
        Assert.Null(read.RouteClosure);
    }
}
