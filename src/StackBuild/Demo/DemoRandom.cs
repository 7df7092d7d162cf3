namespace StackBuild.Demo;

/// <summary>
/// Deterministic random numbers for the demo specimen, independent of the .NET version: SplitMix64
/// (Steele, Lea &amp; Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA). Each stream is
/// keyed by (seed, purpose, number) so sections can be made in parallel and still come out the same.
/// </summary>
internal sealed class DemoRandom
{
    private ulong _state;
    private double? _spareGaussian;

    public DemoRandom(int seed, int purpose, int number = 0) =>
        _state = Key(seed, purpose, number);

    /// <summary>A well-mixed 64-bit key for (seed, purpose, number); also the seed of lattice noise.</summary>
    public static ulong Key(int seed, int purpose, int number = 0) =>
        Mix(Mix(Mix((ulong)(uint)seed + 0x9E3779B97F4A7C15UL) ^ (ulong)(uint)purpose * 0xD1B54A32D192ED03UL)
            + (ulong)(uint)number * 0xAEF17502108EF2D9UL);

    /// <summary>The SplitMix64 output function (a bijective 64-bit mixer).</summary>
    public static ulong Mix(ulong z)
    {
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }

    public ulong NextULong() => Mix(_state += 0x9E3779B97F4A7C15UL);

    /// <summary>Uniform in [0, 1).</summary>
    public double NextDouble() => (NextULong() >> 11) * (1.0 / (1UL << 53));

    public double Uniform(double low, double high) => low + (high - low) * NextDouble();

    /// <summary>Uniform integer in [0, n).</summary>
    public int NextInt(int n) => (int)(NextDouble() * n);

    /// <summary>Standard normal deviate (Box–Muller; the second value of each pair is kept for the next call).</summary>
    public double NextGaussian()
    {
        if (_spareGaussian is double spare)
        {
            _spareGaussian = null;
            return spare;
        }
        double u1 = 1.0 - NextDouble(), u2 = NextDouble();
        double r = Math.Sqrt(-2.0 * Math.Log(u1)), a = 2.0 * Math.PI * u2;
        _spareGaussian = r * Math.Sin(a);
        return r * Math.Cos(a);
    }
}
