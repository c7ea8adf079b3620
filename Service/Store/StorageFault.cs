using Microsoft.Data.Sqlite;

namespace Bitbudget.Service.Store;

/// <summary>
/// Tells a fault of the data folder (disk full, read-only, I/O error, permissions) from an error of the
/// request or the search: the first is the machine's, passes once the disk is fixed, and must neither fail
/// a search nor be answered as a 500.
/// </summary>
internal static class StorageFault
{
    // SQLite result codes (sqlite.org/rescode.html): READONLY 8, IOERR 10, FULL 13, CANTOPEN 14.
    private static readonly int[] SqliteStorageCodes = [8, 10, 13, 14];

    public static bool Is(Exception exception) => exception switch
    {
        SqliteException sqlite => SqliteStorageCodes.Contains(sqlite.SqliteErrorCode),
        // A missing blob is lost data, not a passing fault; every other I/O error writing the folder is.
        FileNotFoundException => false,
        IOException or UnauthorizedAccessException => true,
        AggregateException { InnerExceptions: [var inner] } => Is(inner),
        _ => exception.InnerException is { } cause && Is(cause),
    };
}
