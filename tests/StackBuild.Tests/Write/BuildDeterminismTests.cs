using System.IO.Compression;
using System.Text.RegularExpressions;
using StackBuild.Imaging;
using StackBuild.Pipeline;
using StackBuild.Series;
using StackBuild.Write;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The same inputs and options give the same volume and sidecar, byte for byte, apart from the sidecar's one run
/// field (<c>created</c>); and a build on images already in memory is the build on their files. Both builds run in one
/// process, so they share FFTW's plans; docs/architecture.md says what differs when the plans do.
/// </summary>
public sealed class BuildDeterminismTests
{
    /// <summary>The sidecar's run timestamp, the one field allowed to differ between two builds of the same inputs.</summary>
    private static readonly Regex Created = new("\"created\": \"[^\"]*\"", RegexOptions.CultureInvariant);

    [Fact]
    public void TheDemoBuiltTwiceGivesIdenticalFiles()
    {
        using var first = new TempFolder();
        using var second = new TempFolder();
        var options = new BuildOptions { Input = RepositoryPaths.DemoSeries };
        var a = BuildPaths(first.Path);
        var b = BuildPaths(second.Path);
        BuildWriter.Write(BuildReview.Review(BuildPipeline.Run(options)), a);
        BuildWriter.Write(BuildReview.Review(BuildPipeline.Run(options)), b);

        Assert.Equal(Gunzip(a.Volume), Gunzip(b.Volume));
        string sidecarA = File.ReadAllText(a.Sidecar), sidecarB = File.ReadAllText(b.Sidecar);
        Assert.Single(Created.Matches(sidecarA));
        Assert.Equal(Created.Replace(sidecarA, "\"created\": \"\""), Created.Replace(sidecarB, "\"created\": \"\""));
    }

    [Fact]
    public void ImagesInMemoryBuildAsTheirFiles()
    {
        var options = new BuildOptions { Input = RepositoryPaths.DemoSeries };
        var series = SeriesReader.Open(options.Input, options.Series);
        var images = series.Sections.Where(s => s.Status == SectionStatus.Present)
            .ToDictionary(s => s.Number, s => SectionImageReader.ReadGray(s.FilePath!));
        var fromFiles = BuildPipeline.Run(options);
        var fromMemory = BuildPipeline.Run(options, series, new SectionsInMemory(images));

        Assert.Equal(fromFiles.Volume.Voxels, fromMemory.Volume.Voxels);
        Assert.Equal(fromFiles.Volume.Affine.ToRows(), fromMemory.Volume.Affine.ToRows());
        Assert.Equal(fromFiles.Record.Sections.Select(s => s.Matrix), fromMemory.Record.Sections.Select(s => s.Matrix));
    }

    private static BuildOutputPaths BuildPaths(string folder) => BuildOutputPaths.For(Path.Combine(folder, "demo.nii.gz"));

    private static byte[] Gunzip(string path)
    {
        using var input = new GZipStream(File.OpenRead(path), CompressionMode.Decompress);
        using var output = new MemoryStream();
        input.CopyTo(output);
        return output.ToArray();
    }

    private sealed class TempFolder : IDisposable
    {
        public string Path { get; } = Directory.CreateTempSubdirectory("stackbuild-determinism-").FullName;
        public void Dispose() => Directory.Delete(Path, recursive: true);
    }
}
