using System.Data.Common;
using Microsoft.Data.Sqlite;

namespace Bitbudget.Service.Store;

/// <summary>The embedded default: one SQLite file in the data folder, in WAL mode.</summary>
internal sealed class SqliteDialect(string path) : StoreDialect
{
    // SQLite result codes (sqlite.org/rescode.html): READONLY 8, IOERR 10, FULL 13, CANTOPEN 14.
    private static readonly int[] StorageCodes = [8, 10, 13, 14];

    // Microsoft.Data.Sqlite retries SQLITE_BUSY until the command timeout; busy_timeout covers the
    // statements it runs outside commands (BEGIN, COMMIT).
    private readonly string connectionString = new SqliteConnectionStringBuilder
    {
        DataSource = path,
        Mode = SqliteOpenMode.ReadWriteCreate,
        Cache = SqliteCacheMode.Private,
        Pooling = true,
        DefaultTimeout = 30,
    }.ToString();

    public override string Name => "sqlite";

    public override string Location => path;

    public override string InsertOrder => "rowid";

    public override DbConnection Open()
    {
        var connection = new SqliteConnection(connectionString);
        connection.Open();
        using var pragma = connection.CreateCommand();
        pragma.CommandText = "PRAGMA busy_timeout = 10000; PRAGMA foreign_keys = ON; PRAGMA synchronous = NORMAL;";
        pragma.ExecuteNonQuery();
        return connection;
    }

    public override void PrepareForMigration(DbConnection connection)
    {
        using var command = connection.CreateCommand();
        command.CommandText = "PRAGMA journal_mode = WAL;";
        command.ExecuteNonQuery();
    }

    public override string SqlOf(Migration migration) => migration.Sqlite;

    /// <summary>True when SQLite says the file cannot take writes (read-only, I/O error, disk full, cannot open).</summary>
    public static bool IsStorageFault(SqliteException exception) => StorageCodes.Contains(exception.SqliteErrorCode);
}
