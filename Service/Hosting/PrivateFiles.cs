using System.Runtime.InteropServices;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// Sets the process's file-creation mask to 077 on Unix, so every file and folder the service creates
/// (the SQLite store and job queue with their -wal/-shm files, logs, blobs, temporary files) is readable by
/// its own user only, including those made by libraries that take no mode (Serilog, Hangfire's storage).
/// </summary>
internal static partial class PrivateFiles
{
    private const uint OwnerOnlyMask = 0b000_111_111; // 077: no group or other bits.

    public static void Apply()
    {
        if (!OperatingSystem.IsWindows())
        {
            _ = Umask(OwnerOnlyMask);
        }
    }

    // umask(2) never fails and takes only the mask (POSIX.1-2008).
    [DllImport("libc", EntryPoint = "umask")]
    [DefaultDllImportSearchPaths(DllImportSearchPath.SafeDirectories)]
    private static extern uint Umask(uint mask);
}
