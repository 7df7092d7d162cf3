using StackBuild.Cli;
using Xunit;

namespace StackBuild.Tests;

public class DemoCommandTests
{
    private static (int Code, string Out, string Error) Run(params string[] args)
    {
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = Program.Run(args, stdout, stderr);
        return (code, stdout.ToString(), stderr.ToString());
    }

    [Fact]
    public void WritesTheSeriesAndSaysWhatItWrote()
    {
        var dir = DemoSpecimenTests.TempFolder();
        try
        {
            var (code, output, error) = Run("demo", dir, "--sections", "8", "--size", "64", "--seed", "3");
            Assert.True(code == 0, error);
            Assert.True(File.Exists(Path.Combine(dir, "manifest.csv")));
            Assert.True(File.Exists(Path.Combine(dir, "truth.json")));
            var pngs = Directory.GetFiles(dir, "section_*.png");
            Assert.InRange(pngs.Length, 6, 8);
            Assert.Contains($"{pngs.Length} section images", output);
            Assert.Contains("64×51", output);
            Assert.DoesNotContain(Directory.GetFiles(dir), f => f.EndsWith(".part", StringComparison.Ordinal));
        }
        finally
        {
            if (Directory.Exists(dir)) Directory.Delete(dir, true);
        }
    }

    [Fact]
    public void ReplacesAnEarlierDemoOnlyWithForceAndRemovesItsExtraImages()
    {
        var dir = DemoSpecimenTests.TempFolder();
        try
        {
            Assert.Equal(0, Run("demo", dir, "--sections", "14", "--size", "48").Code);
            Assert.Contains(Directory.GetFiles(dir), f => Path.GetFileName(f) == "section_014.png");
            File.WriteAllText(Path.Combine(dir, "my-notes.txt"), "kept");
            var before = Directory.GetFiles(dir).Order().Select(f => (f, File.ReadAllBytes(f))).ToList();
            var (refused, _, refusal) = Run("demo", dir, "--sections", "5", "--size", "48");
            Assert.Equal(CliOutput.ExitInputProblem, refused); // never replaced without being asked
            Assert.Contains("already holds a demo series", refusal);
            Assert.Contains("--force", refusal);
            Assert.Equal(before.Select(b => b.f), Directory.GetFiles(dir).Order());
            Assert.All(before, b => Assert.Equal(b.Item2, File.ReadAllBytes(b.f)));
            var (code, output, error) = Run("demo", dir, "--sections", "5", "--size", "48", "--force");
            Assert.True(code == 0, error);
            Assert.Contains("Replaced", output);
            Assert.DoesNotContain(Directory.GetFiles(dir, "section_*.png"), f => string.CompareOrdinal(Path.GetFileName(f), "section_005.png") > 0);
            Assert.Equal("kept", File.ReadAllText(Path.Combine(dir, "my-notes.txt")));
        }
        finally
        {
            if (Directory.Exists(dir)) Directory.Delete(dir, true);
        }
    }

    [Fact]
    public void RefusesAFolderThatHoldsSomethingElse()
    {
        var dir = DemoSpecimenTests.TempFolder();
        Directory.CreateDirectory(dir);
        try
        {
            File.WriteAllText(Path.Combine(dir, "scan.png"), "not ours");
            var (code, _, error) = Run("demo", dir, "--sections", "5", "--size", "48");
            Assert.Equal(CliOutput.ExitInputProblem, code);
            Assert.Contains("not made by `stackbuild demo`", error);
            Assert.Contains("choose a new or empty folder", error);
            Assert.Equal(["scan.png"], Directory.GetFiles(dir).Select(Path.GetFileName));

            // With --force the demo goes beside the file, which is not touched.
            var (forced, _, forcedError) = Run("demo", dir, "--sections", "5", "--size", "48", "--force");
            Assert.True(forced == 0, forcedError);
            Assert.Equal("not ours", File.ReadAllText(Path.Combine(dir, "scan.png")));
            Assert.True(File.Exists(Path.Combine(dir, "truth.json")));
        }
        finally
        {
            Directory.Delete(dir, true);
        }
    }

    [Fact]
    public void RefusesNumbersOutOfRangeWithOneLineEach()
    {
        var dir = DemoSpecimenTests.TempFolder();
        var (code, _, error) = Run("demo", dir, "--sections", "2", "--size", "20000");
        Assert.Equal(CliOutput.ExitInputProblem, code);
        var lines = error.Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.Equal(2, lines.Length);
        Assert.Contains("--sections 2", lines[0]);
        Assert.Contains("3 to 2000", lines[0]);
        Assert.Contains("--size 20000", lines[1]);
        Assert.Contains("32 to 8192", lines[1]);
        Assert.False(Directory.Exists(dir));

        var (tooBig, _, bigError) = Run("demo", dir, "--sections", "2000", "--size", "8192");
        Assert.Equal(CliOutput.ExitInputProblem, tooBig);
        Assert.Contains("too large", bigError);
    }

    [Fact]
    public void RefusesAFileAsTheOutputFolder()
    {
        var file = Path.GetTempFileName();
        try
        {
            var (code, _, error) = Run("demo", file, "--sections", "5", "--size", "48");
            Assert.Equal(CliOutput.ExitInputProblem, code);
            Assert.Contains("not a folder", error);
        }
        finally
        {
            File.Delete(file);
        }
    }

    [Fact]
    public void ForceNeverReplacesAFileTheDemoDidNotWrite()
    {
        var dir = DemoSpecimenTests.TempFolder();
        Directory.CreateDirectory(dir);
        try
        {
            File.WriteAllText(Path.Combine(dir, "manifest.csv"), "section,file\n1,mine.png\n");
            var (code, _, error) = Run("demo", dir, "--sections", "5", "--size", "48", "--force");
            Assert.Equal(CliOutput.ExitInputProblem, code);
            Assert.Contains("manifest.csv", error);
            Assert.Contains("would replace this file", error);
            Assert.Equal(["manifest.csv"], Directory.GetFiles(dir).Select(Path.GetFileName));
            Assert.Equal("section,file\n1,mine.png\n", File.ReadAllText(Path.Combine(dir, "manifest.csv")));
        }
        finally
        {
            Directory.Delete(dir, true);
        }
    }
}
