namespace StackBuild.IO;

/// <summary>
/// Files that belong together (a volume, its sidecar, its report), put in place together or not at all.
/// </summary>
/// <remarks>
/// Every file is first written in full under a temporary name in its own folder (<see cref="Stage"/>); only then are they
/// renamed into place, in the order they were staged (<see cref="Commit"/>). A file already at an output path is kept under
/// a hidden backup name until the whole set is in place, so when a rename fails the files already renamed are taken back
/// and the earlier set is restored as it was. Stage the file that vouches for the others last (the sidecar, which names
/// the volume and its checksum): if the process is killed between two renames, the paths hold the earlier set with some
/// of its files replaced by new ones, and the last file, still the earlier one, does not match them.
/// Disposing a set that was not committed removes its temporary files.
/// </remarks>
public sealed class OutputSet : IDisposable
{
    private readonly List<(string Path, string Temporary, bool Folder)> _staged = [];
    private readonly Action<string>? _beforeRename;
    private bool _committed;

    /// <param name="beforeRename">Called with each output path just before its file is renamed into place (tests use it to
    /// make a rename fail part-way).</param>
    public OutputSet(Action<string>? beforeRename = null) => _beforeRename = beforeRename;

    /// <summary>
    /// Writes one file of the set under a temporary name beside <paramref name="path"/>; returns that name. First removes what
    /// an earlier run killed while writing this path left there (<see cref="AtomicFile.RemoveLeftovers"/>).
    /// </summary>
    public string Stage(string path, Action<Stream> write)
    {
        if (_committed) throw new InvalidOperationException("The set is already in place.");
        AtomicFile.RemoveLeftovers(path);
        var temporary = AtomicFile.WriteTemporary(path, write);
        _staged.Add((path, temporary, false));
        return temporary;
    }

    /// <summary>
    /// Writes one output of the set that is a folder (an OME-Zarr image) under a temporary name beside <paramref name="path"/>;
    /// returns that name. <paramref name="write"/> is given the empty temporary folder to fill. On <see cref="Commit"/> a folder
    /// already at the path is moved to a hidden backup name, the new one renamed into place, and the backup removed once the
    /// whole set is in place. Unlike a file, a folder cannot be renamed over another: between the two renames the path is
    /// empty for an instant.
    /// </summary>
    public string StageFolder(string path, Action<string> write)
    {
        if (_committed) throw new InvalidOperationException("The set is already in place.");
        AtomicFile.RemoveLeftovers(path);
        var temporary = AtomicFile.WriteTemporaryFolder(path, write);
        _staged.Add((path, temporary, true));
        return temporary;
    }

    /// <summary>
    /// Renames every staged file into place, in the order staged. On failure, the files already renamed are taken back
    /// (an earlier file at the path is restored, a new one removed), every temporary file is removed, and the error is
    /// thrown as an <see cref="IOException"/> naming the output that failed.
    /// </summary>
    public void Commit()
    {
        if (_committed) throw new InvalidOperationException("The set is already in place.");
        var done = new List<(string Path, string? Backup, bool Folder)>();
        int next = 0;
        try
        {
            for (; next < _staged.Count; next++)
            {
                var (path, temporary, folder) = _staged[next];
                _beforeRename?.Invoke(path);
                string? backup = null;
                if (folder)
                {
                    if (Directory.Exists(path))
                    {
                        backup = AtomicFile.TemporaryName(path, "old");
                        Directory.Move(path, backup);
                        done.Add((path, backup, true)); // taken back below if the next rename fails
                        Directory.Move(temporary, path);
                        continue;
                    }
                    Directory.Move(temporary, path);
                }
                else if (File.Exists(path))
                {
                    // A second name for the earlier file (a hard link where the file system has them), then one rename
                    // over it: the path never lacks a file.
                    backup = AtomicFile.TemporaryName(path, "old");
                    File.Replace(temporary, path, backup, ignoreMetadataErrors: true);
                }
                else
                {
                    File.Move(temporary, path, overwrite: false);
                }
                done.Add((path, backup, folder));
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            var failed = _staged[next].Path;
            for (int i = done.Count - 1; i >= 0; i--)
            {
                var (path, backup, folder) = done[i];
                try
                {
                    if (folder)
                    {
                        // The new folder is not there when the failing rename was its own (its backup was already made).
                        if (Directory.Exists(path)) Directory.Delete(path, recursive: true);
                        if (backup is not null) Directory.Move(backup, path);
                    }
                    else if (backup is not null) File.Move(backup, path, overwrite: true);
                    else File.Delete(path);
                }
                catch (Exception undo) when (undo is IOException or UnauthorizedAccessException)
                {
                    // Nothing more can be done here; the error below names the output that failed.
                }
            }
            for (int i = next; i < _staged.Count; i++) Discard(_staged[i]);
            _staged.Clear();
            throw new IOException($"{failed}: could not be put in place ({e.Message.TrimEnd('.')}); the outputs were left as they were before this run", e);
        }
        _committed = true;
        foreach (var (_, backup, folder) in done)
            if (backup is not null)
            {
                if (folder) AtomicFile.DiscardFolder(backup); else AtomicFile.Discard(backup);
            }
    }

    /// <summary>Removes the temporary files of a set that was not put in place.</summary>
    public void Dispose()
    {
        if (_committed) return;
        foreach (var staged in _staged) Discard(staged);
        _staged.Clear();
    }

    private static void Discard((string Path, string Temporary, bool Folder) staged)
    {
        if (staged.Folder) AtomicFile.DiscardFolder(staged.Temporary); else AtomicFile.Discard(staged.Temporary);
    }
}
