using System.Collections.Concurrent;
using StackBuild.Register;
using StackBuild.Solve;
using StackBuild.Template;

namespace StackBuild.Pipeline;

/// <summary>
/// Stage 3, the pair set: every pair within <see cref="MirrorParity.MaxReach"/> sections registered, the whole stack's
/// mirror decision, and each pair's best hypothesis with that mirror. Indices are positions in
/// <see cref="PreparedSections"/>, as (moving, fixed).
/// </summary>
/// <remarks>
/// The chain may ask for a pair further apart than the first registration reached (<see cref="Pair"/>); that pair is
/// registered then, with the same mirror decision, and kept in <see cref="Pairs"/>, so the later solve sees it too.
/// </remarks>
public sealed class PairSet
{
    private readonly ConcurrentDictionary<(int, int), PairResult> _pairs;
    private readonly Func<int, int, PairResult> _register;

    internal PairSet(ParityResult parity, ConcurrentDictionary<(int, int), PairResult> pairs, Func<int, int, PairResult> register,
        IReadOnlyList<TemplateMatch?>? sideMatches = null)
    {
        Parity = parity;
        SideMatches = sideMatches;
        _pairs = pairs;
        _register = register;
    }

    /// <summary>Which side of every section is up (<see cref="MirrorParity.Decide"/>).</summary>
    public ParityResult Parity { get; }

    /// <summary>The template matches from scratch that voted on the sides (<see cref="TemplateStage.SideMatches"/>), when a template guided them.</summary>
    public IReadOnlyList<TemplateMatch?>? SideMatches { get; }

    /// <summary>Every pair registered so far, with the decided mirror.</summary>
    public IReadOnlyDictionary<(int Moving, int Fixed), PairResult> Pairs => (IReadOnlyDictionary<(int, int), PairResult>)_pairs;

    /// <summary>The pair (moving, fixed) with the decided mirror, registered now if it was not yet.</summary>
    public PairResult Pair(int moving, int fixedIndex) =>
        _pairs.GetOrAdd((moving, fixedIndex), k => _register(k.Item1, k.Item2).WithMirror(Parity.Flipped[k.Item1] != Parity.Flipped[k.Item2]));
}

public static class RegisterStage
{
    /// <summary>
    /// Registers neighbouring sections and decides the whole stack's mirror from all of them at once; with template
    /// <paramref name="slices"/>, the template's matches vote where the pairs can hardly tell. With a
    /// <paramref name="cache"/>, a pair registered by an earlier run with the same images and options is taken from it
    /// instead of registered again (<see cref="PairKey"/>), and each pair registered here is handed to it.
    /// </summary>
    public static PairSet Register(SeriesPlan plan, PreparedSections sections, TemplateSlices? slices, IProgress<string>? progress,
        IPairCache? cache = null)
    {
        var register = Registrar(sections, plan.Options, cache);
        var registered = RegisterNeighbours(sections.Count, register, progress);
        // Which side of every section is up, decided from every pair within MirrorParity.MaxReach sections at once; each
        // pair then keeps its best hypothesis with that mirror, so one weak pair cannot turn over the sections after it.
        // Pairs weigh by how many sections apart they really lie (a lost section between makes a pair a second neighbour).
        var steps = sections.Sections.Select(w => w.Entry.PositionUm / plan.Series.SpacingUm).ToList();
        var parity = MirrorParity.Decide(sections.Count, registered, steps);
        TemplateMatch?[]? sideMatches = null;
        if (slices is not null)
        {
            // Where the pairs can hardly tell a section's side, its template match from scratch votes (and a spread of
            // confident sections says whether face up looks mirrored on the template).
            sideMatches = TemplateStage.SideMatches(sections, slices, parity, progress);
            parity = MirrorParity.Decide(sections.Count, registered, steps, sideMatches.Select(m => m is null ? null : TemplateStage.SideVoteOf(m)).ToList());
        }
        var pairs = new ConcurrentDictionary<(int, int), PairResult>(registered.Select(kv =>
            KeyValuePair.Create(kv.Key, kv.Value.WithMirror(parity.Flipped[kv.Key.Item1] != parity.Flipped[kv.Key.Item2]))));
        return new PairSet(parity, pairs, register, sideMatches);
    }

    private static ConcurrentDictionary<(int, int), PairResult> RegisterNeighbours(int count, Func<int, int, PairResult> register, IProgress<string>? progress)
    {
        var jobs = new List<(int Moving, int Fixed)>();
        for (int i = 1; i < count; i++)
            for (int d = 1; d <= Math.Min(i, MirrorParity.MaxReach); d++)
                jobs.Add((i, i - d));
        var pairs = new ConcurrentDictionary<(int, int), PairResult>();
        int done = 0;
        Parallel.ForEach(jobs, new ParallelOptions { MaxDegreeOfParallelism = Environment.ProcessorCount }, job =>
        {
            pairs[job] = register(job.Moving, job.Fixed);
            progress?.Report($"registering: {Interlocked.Increment(ref done)}/{jobs.Count} pairs");
        });
        return pairs;
    }

    /// <summary>
    /// Registers the pair (moving, fixed): from <paramref name="cache"/> when it holds the pair, else afresh, then kept there.
    /// A section's digest is taken from its working image (what its registration image is prepared from) once, when a pair
    /// first needs it.
    /// </summary>
    private static Func<int, int, PairResult> Registrar(PreparedSections sections, BuildOptions options, IPairCache? cache)
    {
        var digests = sections.Sections.Select(w => new Lazy<ImageDigest>(() => ImageDigest.Of(w.Image, w.Prepared?.Finer?.WorkImage))).ToArray();
        return (moving, fixedIndex) =>
        {
            bool? a = sections[moving].Entry.MountedMirrored, b = sections[fixedIndex].Entry.MountedMirrored;
            var o = options.Registration with { KnownMirrored = a is { } ma && b is { } mb ? ma != mb : null };
            if (cache is null) return SectionRegistration.Register(sections[fixedIndex].Prepared!, sections[moving].Prepared!, o);
            var key = PairKey.For(digests[fixedIndex].Value, digests[moving].Value, o);
            if (cache.Find(key) is { } earlier) return earlier;
            var result = SectionRegistration.Register(sections[fixedIndex].Prepared!, sections[moving].Prepared!, o);
            cache.Keep(key, result);
            return result;
        };
    }
}
