using Xunit;

namespace StackBuild.Tests;

/// <summary>A long run, on request only: skipped (and counted as skipped) unless STACKBUILD_SOAK=1.</summary>
public sealed class SoakFactAttribute : FactAttribute
{
    public SoakFactAttribute()
    {
        if (Environment.GetEnvironmentVariable("STACKBUILD_SOAK") != "1")
            Skip = "long run: STACKBUILD_SOAK=1 bash tests/run.sh";
    }
}
