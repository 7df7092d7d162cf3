namespace StackBuild.Demo;

/// <summary>
/// Which sections of the demo series were lost, torn, excluded or mounted face down. Mishaps are placed
/// apart from each other and never at the first or last section, with at least one good section between
/// any two, so each one can be seen on its own.
/// </summary>
internal sealed record DemoLayout(bool[] Lost, bool[] Torn, bool[] Excluded, bool[] Mirrored)
{
    private enum Mishap { LostRun, Lost, Torn, Excluded }

    public static DemoLayout Choose(int seed, int sections)
    {
        int n = sections;
        var rng = new DemoRandom(seed, 2);
        // For 60 sections: one run of 2 lost, 3 single lost, 1 torn, 1 excluded (about 8 % lost, as in a
        // careful series).
        int isolated = n < 8 ? 0 : Math.Max(1, (int)Math.Round(n / 22.0));
        int runs = n < 12 ? 0 : Math.Max(1, n / 120);
        int torn = n < 5 ? 0 : Math.Max(1, n / 150);
        int excluded = n < 7 ? 0 : Math.Max(1, n / 150);
        var wanted = new List<Mishap>();
        wanted.AddRange(Enumerable.Repeat(Mishap.LostRun, runs));
        wanted.AddRange(Enumerable.Repeat(Mishap.Torn, torn));
        wanted.AddRange(Enumerable.Repeat(Mishap.Excluded, excluded));
        wanted.AddRange(Enumerable.Repeat(Mishap.Lost, isolated));

        var lost = new bool[n];
        var tornFlags = new bool[n];
        var excludedFlags = new bool[n];
        var taken = new bool[n];
        foreach (var mishap in wanted)
        {
            int length = mishap == Mishap.LostRun ? 2 : 1;
            for (int attempt = 0; attempt < 500; attempt++)
            {
                int first = 1 + rng.NextInt(Math.Max(1, n - 1 - length));
                int last = first + length - 1;
                if (last > n - 2 || !Free(taken, first - 1, last + 1)) continue;
                for (int k = first; k <= last; k++)
                {
                    taken[k] = true;
                    if (mishap is Mishap.Lost or Mishap.LostRun) lost[k] = true;
                    else if (mishap == Mishap.Torn) tornFlags[k] = true;
                    else excludedFlags[k] = true;
                }
                break;
            }
        }

        // About one in ten of the sections that reached a slide went on face down.
        var present = Enumerable.Range(0, n).Where(k => !lost[k]).ToArray();
        int mirroredCount = (int)Math.Round(present.Length * 0.1, MidpointRounding.AwayFromZero);
        for (int i = 0; i < mirroredCount; i++)
        {
            int j = i + rng.NextInt(present.Length - i);
            (present[i], present[j]) = (present[j], present[i]);
        }
        var mirrored = new bool[n];
        foreach (int k in present.Take(mirroredCount)) mirrored[k] = true;
        return new DemoLayout(lost, tornFlags, excludedFlags, mirrored);
    }

    private static bool Free(bool[] taken, int from, int to)
    {
        for (int k = Math.Max(0, from); k <= Math.Min(taken.Length - 1, to); k++)
            if (taken[k]) return false;
        return true;
    }
}
