using System.Diagnostics;

namespace StackBuild.Pipeline;

/// <summary>
/// What one stage of a build cost: wall time, the process's CPU time (every thread, the garbage collector's too), the
/// bytes the managed heap handed out during the stage, the managed heap's size when it ended and the process's peak
/// resident memory so far. For `stackbuild build --verbose` and the benchmarks; nothing of it goes into the sidecar, so a
/// build's outputs do not depend on it.
/// </summary>
public sealed record StageCost(string Stage, TimeSpan Wall, TimeSpan Cpu, long AllocatedBytes, long HeapBytes, long PeakResidentBytes);

/// <summary>
/// Times the stages of one build, in the order they ran. Reading the clocks costs microseconds a stage, so it is cheap
/// enough to leave on whenever someone asks for it; a build given no clock (<c>null</c>) reads none.
/// </summary>
public sealed class StageClock
{
    private readonly List<StageCost> _stages = [];
    private readonly Process _process = Process.GetCurrentProcess();

    /// <summary>The stages timed so far, in the order they ran.</summary>
    public IReadOnlyList<StageCost> Stages => _stages;

    /// <summary>Runs <paramref name="stage"/> and records what it cost under <paramref name="name"/>.</summary>
    public T Time<T>(string name, Func<T> stage)
    {
        _process.Refresh();
        var cpu = _process.TotalProcessorTime;
        long allocated = GC.GetTotalAllocatedBytes(precise: false);
        var wall = Stopwatch.StartNew();
        var result = stage();
        wall.Stop();
        _process.Refresh();
        _stages.Add(new StageCost(name, wall.Elapsed, _process.TotalProcessorTime - cpu, GC.GetTotalAllocatedBytes(precise: false) - allocated,
            GC.GetTotalMemory(forceFullCollection: false), _process.PeakWorkingSet64));
        return result;
    }

    /// <summary>Runs <paramref name="stage"/> and records what it cost under <paramref name="name"/>.</summary>
    public void Time(string name, Action stage) => Time(name, () => { stage(); return 0; });

    /// <summary>Runs <paramref name="stage"/> timed on <paramref name="clock"/>, or untimed when there is none.</summary>
    public static T Time<T>(StageClock? clock, string name, Func<T> stage) => clock is null ? stage() : clock.Time(name, stage);
}
