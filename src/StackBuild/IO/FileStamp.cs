namespace StackBuild.IO;

/// <summary>
/// A file's length and last write time when a run first looked at it. A build lists its series (headers only) and reads
/// the pixels later, twice; a file removed, truncated or written over in between is reported as such instead of as a
/// damaged image, since copying it again is not what is needed.
/// </summary>
public sealed record FileStamp(long Bytes, DateTime LastWriteUtc)
{
    /// <summary>The stamp of the file at <paramref name="path"/> now; null when it does not exist or cannot be looked at.</summary>
    public static FileStamp? Of(string path)
    {
        try
        {
            var info = new FileInfo(path);
            return info.Exists ? new FileStamp(info.Length, info.LastWriteTimeUtc) : null;
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { return null; }
    }

    /// <summary>
    /// Refuses, in one line naming the file, a file that is gone or not as it was when stamped (another length or last
    /// write time). <paramref name="since"/> says when it was stamped, e.g. "the series was listed".
    /// </summary>
    public void CheckUnchanged(string path, string since)
    {
        const string remedy = "leave the series' files alone while a build runs (wait until a copy into the folder has finished), then run the build again";
        var now = Of(path);
        if (now is null)
            throw new InputProblemException(path, $"was removed after {since}", $"put it back (or take it out of the series), {remedy}");
        if (now.Bytes != Bytes)
            throw new InputProblemException(path, $"changed after {since} (it had {Bytes:N0} bytes then and has {now.Bytes:N0} now)", remedy);
        if (now.LastWriteUtc != LastWriteUtc)
            throw new InputProblemException(path, $"was written to after {since} (same length, another last write time)", remedy);
    }
}
