using Bitbudget.Search;
using Bitbudget.Service.Problems;
using Microsoft.Data.Sqlite;
using Npgsql;

namespace Bitbudget.Service.Store;

/// <summary>
/// Tells a fault of the data folder (disk full, read-only, I/O error, permissions) from an error of the
/// request or the search: the first is the machine's, passes once the disk is fixed, and must neither fail
/// a search nor be answered as a 500. Only unambiguous signs count here; an other I/O error is a storage
/// fault only when <see cref="StoreProbe"/> confirms it by failing a write.
/// </summary>
internal static class StorageFault
{
    // An IOException's HResult is the errno on Unix (EIO 5, ENOSPC 28, EROFS 30, EDQUOT 122) and
    // ERROR_HANDLE_DISK_FULL / ERROR_DISK_FULL on Windows.
    private static readonly int[] DiskErrors = [5, 28, 30, 122, unchecked((int)0x80070027), unchecked((int)0x80070070)];

    public static bool Is(Exception exception) => exception switch
    {
        // Refusals of the input, even when a parser's I/O exception sits inside them (a truncated protobuf).
        EngineException or ServiceException or BadHttpRequestException => false,
        SqliteException sqlite => SqliteDialect.IsStorageFault(sqlite),
        NpgsqlException postgres => PostgresDialect.IsStorageFault(postgres),
        IOException io => DiskErrors.Contains(io.HResult),
        UnauthorizedAccessException => true,
        AggregateException { InnerExceptions: [var inner] } => Is(inner),
        _ => exception.InnerException is { } cause && Is(cause),
    };
}
