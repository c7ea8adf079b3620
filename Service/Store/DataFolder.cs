namespace Bitbudget.Service.Store;

/// <summary>
/// Creates the data folder's directories and files readable by the service's user only (0700 and 0600 on
/// Unix): uploaded models and calibration sets are often confidential, and the folder holds the API key.
/// </summary>
internal static class DataFolder
{
    public const UnixFileMode DirectoryMode = UnixFileMode.UserRead | UnixFileMode.UserWrite | UnixFileMode.UserExecute;

    public const UnixFileMode FileMode = UnixFileMode.UserRead | UnixFileMode.UserWrite;

    /// <summary>Group and other permission bits; a private file has none of them.</summary>
    public const UnixFileMode SharedBits =
        UnixFileMode.GroupRead | UnixFileMode.GroupWrite | UnixFileMode.GroupExecute |
        UnixFileMode.OtherRead | UnixFileMode.OtherWrite | UnixFileMode.OtherExecute;

    public static void CreateDirectory(string path)
    {
        if (OperatingSystem.IsWindows())
        {
            Directory.CreateDirectory(path);
        }
        else
        {
            Directory.CreateDirectory(path, DirectoryMode);
        }
    }

    /// <summary>Options for a new file that only this user may read.</summary>
    public static FileStreamOptions NewFile(System.IO.FileMode mode, FileAccess access, int bufferSize)
    {
        var options = new FileStreamOptions { Mode = mode, Access = access, Share = FileShare.None, BufferSize = bufferSize };
        if (!OperatingSystem.IsWindows())
        {
            options.UnixCreateMode = FileMode;
        }

        return options;
    }

    /// <summary>Creates an empty private file unless it exists, so that SQLite (which gives its -wal and -shm files the database file's mode) keeps the store private.</summary>
    public static void CreatePrivateFile(string path)
    {
        if (!File.Exists(path))
        {
            try
            {
                using var _ = new FileStream(path, NewFile(System.IO.FileMode.CreateNew, FileAccess.Write, bufferSize: 1));
            }
            catch (IOException) when (File.Exists(path))
            {
                // Another process created it first.
            }
        }
    }
}
