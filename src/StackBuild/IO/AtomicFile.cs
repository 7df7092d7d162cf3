namespace StackBuild.IO;

/// <summary>
/// Writes a file under a temporary name in the same folder and renames it into place, so an interrupted
/// run never leaves a truncated file at the output path.
/// </summary>
public static class AtomicFile
{
    public static void Write(string path, Action<Stream> write)
    {
        var temp = WriteTemporary(path, write);
        DiscardingOnFailure(path, temp, () => File.Move(temp, Path.GetFullPath(path), overwrite: true));
    }

    /// <summary>
    /// Writes the file's bytes, flushed to the disk, under a temporary name beside <paramref name="path"/> (hidden, ending in
    /// <c>.part</c>) and returns that name; the caller renames it into place or discards it. Nothing is left behind when
    /// writing fails.
    /// </summary>
    public static string WriteTemporary(string path, Action<Stream> write)
    {
        var full = Path.GetFullPath(path);
        var dir = Path.GetDirectoryName(full) ?? ".";
        if (!Directory.Exists(dir))
            throw new InputProblemException(path, "the folder for this output does not exist", "create the folder first or choose another output path");
        if (Directory.Exists(full))
            throw new InputProblemException(path, "this output path is a folder", "give a file name inside it, or another name");
        var temp = TemporaryName(full, "part");
        FileStream stream;
        try
        {
            stream = new FileStream(temp, FileMode.CreateNew, FileAccess.Write, FileShare.None, 1 << 16);
        }
        catch (Exception e) when (e is UnauthorizedAccessException or IOException)
        {
            throw CannotWriteIn(path, dir, e);
        }
        DiscardingOnFailure(path, temp, () =>
        {
            using (stream)
            {
                write(stream);
                stream.Flush(flushToDisk: true);
            }
        });
        return temp;
    }

    /// <summary>
    /// Writes an output that is a folder (an OME-Zarr image) under a temporary name beside <paramref name="path"/> (hidden,
    /// ending in <c>.part</c>): creates the empty folder, lets <paramref name="write"/> fill it, and returns its name; the caller
    /// renames it into place or discards it. Nothing is left behind when writing fails.
    /// </summary>
    public static string WriteTemporaryFolder(string path, Action<string> write)
    {
        var full = Path.GetFullPath(path);
        var dir = Path.GetDirectoryName(full) ?? ".";
        if (!Directory.Exists(dir))
            throw new InputProblemException(path, "the folder for this output does not exist", "create the folder first or choose another output path");
        var temp = TemporaryName(full, "part");
        try
        {
            Directory.CreateDirectory(temp);
        }
        catch (Exception e) when (e is UnauthorizedAccessException or IOException)
        {
            throw CannotWriteIn(path, dir, e);
        }
        DiscardingOnFailure(path, temp, () => write(temp), DiscardFolder);
        return temp;
    }

    /// <summary>
    /// Runs a step on the temporary file <paramref name="temp"/>; if it fails, removes the file (or folder, with
    /// <paramref name="discard"/>) and says which output it was.
    /// </summary>
    private static void DiscardingOnFailure(string path, string temp, Action step, Action<string>? discard = null)
    {
        discard ??= Discard;
        try
        {
            step();
        }
        catch (IOException e) when (e is not FileNotFoundException and not DirectoryNotFoundException)
        {
            discard(temp);
            throw CouldNotWrite(path, temp, e);
        }
        catch
        {
            discard(temp);
            throw;
        }
    }

    /// <summary>A hidden name beside <paramref name="fullPath"/> that no other run uses: .NAME.PID.GUID.SUFFIX.</summary>
    internal static string TemporaryName(string fullPath, string suffix) =>
        Path.Combine(Path.GetDirectoryName(fullPath) ?? ".", $".{Path.GetFileName(fullPath)}.{Environment.ProcessId}.{Guid.NewGuid():N}.{suffix}");

    /// <summary>
    /// Removes what a run that was killed while writing <paramref name="path"/> left beside it: its hidden temporary files
    /// and folders (<c>.NAME.PID.GUID.part</c>, see <see cref="TemporaryName"/>) and folder write checks (<c>.stackbuild-write-check.PID.GUID</c>)
    /// of processes that no longer run. Files of a process still running (another build writing the same output) are left,
    /// and so are <c>.old</c> backups, which may hold the only copy of an earlier output. Failures to remove are ignored.
    /// Returns the names removed.
    /// </summary>
    public static IReadOnlyList<string> RemoveLeftovers(string path)
    {
        var full = Path.GetFullPath(path);
        var dir = Path.GetDirectoryName(full) ?? ".";
        var removed = new List<string>();
        if (!Directory.Exists(dir)) return removed;
        var name = System.Text.RegularExpressions.Regex.Escape(Path.GetFileName(full));
        var pattern = new System.Text.RegularExpressions.Regex(
            $@"^\.(?:{name}\.(?<pid>\d+)\.[0-9a-f]{{32}}\.part|stackbuild-write-check\.(?<pid>\d+)\.[0-9a-f]{{32}})$",
            System.Text.RegularExpressions.RegexOptions.CultureInvariant);
        string[] candidates;
        try { candidates = Directory.GetFileSystemEntries(dir, ".*"); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException) { return removed; }
        foreach (var file in candidates)
        {
            var match = pattern.Match(Path.GetFileName(file));
            if (!match.Success || !int.TryParse(match.Groups["pid"].Value, out int pid) || pid == Environment.ProcessId || IsRunning(pid)) continue;
            try
            {
                // A folder output (OME-Zarr) is staged as a folder of that name.
                if (Directory.Exists(file)) Directory.Delete(file, recursive: true); else File.Delete(file);
                removed.Add(Path.GetFileName(file));
            }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException) { }
        }
        return removed;
    }

    /// <summary>Whether a process with this id runs now (on Linux, its /proc entry; elsewhere, the process table).</summary>
    private static bool IsRunning(int pid)
    {
        if (OperatingSystem.IsLinux()) return Directory.Exists($"/proc/{pid}");
        try { using var p = System.Diagnostics.Process.GetProcessById(pid); return !p.HasExited; }
        catch (ArgumentException) { return false; }
        catch (InvalidOperationException) { return false; }
    }

    /// <summary>Disk full or a failing device: not the user's input, but say which output it was (exit code 3, README).</summary>
    internal static IOException CouldNotWrite(string path, string temp, IOException e)
    {
        var reason = e.Message.Replace($" : '{temp}'", "", StringComparison.Ordinal).Replace(temp, "the temporary file", StringComparison.Ordinal).TrimEnd('.');
        return new IOException($"{path}: could not be written ({reason}); nothing was left at this path", e);
    }

    /// <summary>
    /// Checks that a file can be created in <paramref name="folder"/> (by creating and removing an empty one), so that a
    /// long run is refused at the start rather than at its end.
    /// </summary>
    public static void CheckFolderWritable(string path, string folder)
    {
        var probe = Path.Combine(folder, $".stackbuild-write-check.{Environment.ProcessId}.{Guid.NewGuid():N}");
        try
        {
            using (new FileStream(probe, FileMode.CreateNew, FileAccess.Write, FileShare.None, 1, FileOptions.DeleteOnClose)) { }
        }
        catch (Exception e) when (e is UnauthorizedAccessException or IOException)
        {
            Discard(probe);
            throw CannotWriteIn(path, folder, e);
        }
    }

    private static InputProblemException CannotWriteIn(string path, string folder, Exception e) =>
        new(path, $"cannot write in the folder {folder} ({(e is UnauthorizedAccessException ? "permission denied" : e.Message.TrimEnd('.'))})",
            "choose an output folder you may write to", e);

    internal static void Discard(string temp)
    {
        try { File.Delete(temp); } catch (IOException) { } catch (UnauthorizedAccessException) { }
    }

    /// <summary>Removes a temporary or backup folder and everything in it; failures are ignored, as <see cref="Discard"/> ignores them.</summary>
    internal static void DiscardFolder(string temp)
    {
        try { Directory.Delete(temp, recursive: true); } catch (IOException) { } catch (UnauthorizedAccessException) { }
    }

    public static void WriteAllText(string path, string text) =>
        Write(path, s => { using var w = new StreamWriter(s, new System.Text.UTF8Encoding(false), 1 << 16, leaveOpen: true); w.Write(text); });

    public static void WriteAllBytes(string path, ReadOnlySpan<byte> bytes)
    {
        var copy = bytes.ToArray();
        Write(path, s => s.Write(copy));
    }
}
