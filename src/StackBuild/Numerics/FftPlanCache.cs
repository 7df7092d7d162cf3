namespace StackBuild.Numerics;

/// <summary>
/// FFTW's plans carried from one run to the next ("wisdom"): planning a transform size with FFTW_MEASURE times several
/// algorithms, which costs a second or so per size the first time. The core never reads or writes this file itself; a
/// program's entry point calls <see cref="Load"/> before its work and <see cref="Save"/> after it. Failures to read or
/// write it are ignored (the plans are then measured again; the results do not depend on them). No effect with the managed FFT.
/// </summary>
public static class FftPlanCache
{
    /// <summary>$XDG_CACHE_HOME/stackbuild/fftwf-wisdom, else ~/.cache/stackbuild/fftwf-wisdom; null when neither is known.</summary>
    public static string? DefaultPath()
    {
        var cache = Environment.GetEnvironmentVariable("XDG_CACHE_HOME");
        if (string.IsNullOrEmpty(cache))
        {
            var home = Environment.GetFolderPath(Environment.SpecialFolder.UserProfile);
            if (string.IsNullOrEmpty(home)) return null;
            cache = Path.Combine(home, ".cache");
        }
        return Path.Combine(cache, "stackbuild", "fftwf-wisdom");
    }

    /// <summary>Reads the plans saved at <paramref name="path"/> (default <see cref="DefaultPath"/>); true when some were read.</summary>
    public static bool Load(string? path = null)
    {
        path ??= DefaultPath();
        if (path is null) return false;
        try { return Fftw.ImportWisdom(path); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { return false; }
    }

    /// <summary>Saves the plans made in this process to <paramref name="path"/> (default <see cref="DefaultPath"/>) when there are new ones; true when written.</summary>
    public static bool Save(string? path = null)
    {
        path ??= DefaultPath();
        if (path is null) return false;
        try { return Fftw.ExportWisdom(path); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { return false; }
    }
}
