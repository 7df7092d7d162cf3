using StackBuild.Cli;
using Xunit;

namespace StackBuild.Tests;

/// <summary>What a person watching a long build sees: the time left on a terminal, and a log that shows it is alive.</summary>
public class ProgressLinesTests
{
    private sealed class FakeClock
    {
        public TimeSpan Now;
        public TimeSpan Read() => Now;
    }

    [Fact]
    public void ATerminalLineCarriesTheTimeLeftAtTheStagesRateSoFar()
    {
        var clock = new FakeClock();
        var lines = new ProgressLines(clock.Read);
        Assert.Equal("loading: 1/10 sections", lines.ForTerminal("loading: 1/10 sections"));
        clock.Now = TimeSpan.FromSeconds(1);
        // Too early in the stage for an estimate.
        Assert.Equal("registering: 1/200 pairs", lines.ForTerminal("registering: 1/200 pairs"));
        clock.Now = TimeSpan.FromSeconds(41);
        // 40 pairs in 40 s: 160 left take 160 s, about 3 min.
        Assert.Equal("registering: 40/200 pairs — about 3 min left", lines.ForTerminal("registering: 40/200 pairs"));
        clock.Now = TimeSpan.FromSeconds(191);
        Assert.Equal("registering: 190/200 pairs — about 10 s left", lines.ForTerminal("registering: 190/200 pairs"));
        // A new stage starts its own clock; a text with no count gets no estimate.
        Assert.Equal("template: matching sections to their slices", lines.ForTerminal("template: matching sections to their slices"));
    }

    [Fact]
    public void ALogGetsAStageLineAndThenACountLineAboutOnceAMinute()
    {
        var clock = new FakeClock();
        var lines = new ProgressLines(clock.Read);
        var log = new List<string>();
        // A 1,000-section registration: 3,000 pairs at 2 a second, reported after every pair.
        for (int done = 1; done <= 3000; done++)
        {
            clock.Now = TimeSpan.FromSeconds(done / 2.0);
            if (lines.ForLog($"registering: {done}/3000 pairs") is { } line) log.Add(line);
        }
        Assert.Equal("registering…", log[0]);
        // 1,500 s of registering: a count line every 60 s, 24 of them (none for the last, finished count).
        Assert.Equal(25, log.Count);
        // The first a minute after the stage began: 121 pairs in 60 s, 2,879 left.
        Assert.Equal("registering: 121/3000 pairs — about 24 min left", log[1]);
        Assert.All(log.Skip(1), l => Assert.Matches(@"^registering: \d+/3000 pairs — about .+ left$", l));
        // The next stage starts with its own line.
        clock.Now += TimeSpan.FromSeconds(1);
        Assert.Equal("rendering…", lines.ForLog("rendering: section 1 (1/1000)"));
        Assert.Null(lines.ForLog("rendering: section 2 (2/1000)"));
    }

    [Theory]
    [InlineData(2, "5 s")]
    [InlineData(42, "40 s")]
    [InlineData(58, "60 s")]
    [InlineData(200, "3 min")]
    [InlineData(5340, "89 min")]
    [InlineData(7800, "2 h 10 min")]
    public void DurationsAreRoundedToWhatTheyDeserve(double seconds, string expected) =>
        Assert.Equal(expected, ProgressLines.Duration(TimeSpan.FromSeconds(seconds)));
}
