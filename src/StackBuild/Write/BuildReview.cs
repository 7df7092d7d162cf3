using StackBuild.Evaluate;
using StackBuild.Pipeline;

namespace StackBuild.Write;

/// <summary>
/// The review of a finished build, the step between the build and its files: each placed section's estimated placement
/// error (<see cref="Uncertainty.Annotate"/>), then the reasons to look at each section (<see cref="SectionFlags.Annotate"/>,
/// which read those estimates). The sidecar, the report and the CLI's summary all show the reviewed record.
/// </summary>
public static class BuildReview
{
    public static BuildResult Review(BuildResult result) => result with { Record = Review(result.Record) };

    public static BuildRecord Review(BuildRecord record) => SectionFlags.Annotate(Uncertainty.Annotate(record));
}
