namespace Bitbudget.Service.Commands;

/// <summary>The <c>--out</c> folder: checked before a search starts, written after; failures are <see cref="OutputFolderException"/> naming the folder.</summary>
internal static class OutputFolder
{
    /// <summary>
    /// Throws unless files can be created in <paramref name="path"/>, or (when it does not exist yet) in the nearest
    /// folder above it that does. Leaves nothing behind: a refused search must not create its output folder.
    /// </summary>
    public static void CheckWritable(string path)
    {
        if (File.Exists(path))
        {
            throw new OutputFolderException($"Cannot write to '{path}' (--out): it is a file, not a folder.");
        }

        var existing = Path.GetFullPath(path);
        while (!Directory.Exists(existing))
        {
            if (File.Exists(existing))
            {
                throw new OutputFolderException($"Cannot write to '{path}' (--out): '{existing}' on its path is a file, not a folder.");
            }

            existing = Path.GetDirectoryName(existing) ?? throw new OutputFolderException($"Cannot write to '{path}' (--out): no folder on its path exists.");
        }

        var probe = Path.Combine(existing, $".bitbudget-write-check-{Environment.ProcessId}-{Guid.NewGuid():N}");
        try
        {
            using (File.Create(probe, 1, FileOptions.DeleteOnClose))
            {
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new OutputFolderException(FileErrors.CannotWrite(existing, e).Replace($"'{existing}'", $"'{path}' (--out)", StringComparison.Ordinal), e);
        }
    }

    /// <summary>Creates the folder and runs <paramref name="write"/> in it; an I/O failure becomes one sentence naming the folder.</summary>
    public static void Write(string path, Action<string> write)
    {
        try
        {
            Directory.CreateDirectory(path);
            write(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new OutputFolderException(FileErrors.CannotWrite(path, e).Replace($"'{path}'", $"'{path}' (--out)", StringComparison.Ordinal), e);
        }
    }
}
