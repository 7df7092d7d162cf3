namespace StackBuild.Tests;

/// <summary>Paths inside this repository, found from the test binaries' folder.</summary>
internal static class RepositoryPaths
{
    public static string Root
    {
        get
        {
            for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
                if (File.Exists(Path.Combine(dir.FullName, "StackBuild.sln"))) return dir.FullName;
            throw new InvalidOperationException("StackBuild.sln not found above " + AppContext.BaseDirectory);
        }
    }

    public static string DemoSeries => Path.Combine(Root, "demo-series");
}
