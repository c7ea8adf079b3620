using Microsoft.Data.Sqlite;

namespace Bitbudget.Service.Store;

/// <summary>Opens connections to the service's SQLite file and brings its schema up to date.</summary>
internal sealed class Database(string path)
{
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

    public string Path { get; } = path;

    public SqliteConnection Open()
    {
        var connection = new SqliteConnection(connectionString);
        connection.Open();
        using var pragma = connection.CreateCommand();
        pragma.CommandText = "PRAGMA busy_timeout = 10000; PRAGMA foreign_keys = ON; PRAGMA synchronous = NORMAL;";
        pragma.ExecuteNonQuery();
        return connection;
    }

    /// <summary>Switches the file to WAL and applies every migration newer than the stored version; safe to run again.</summary>
    /// <returns>The schema version after migrating.</returns>
    public int Migrate()
    {
        using var connection = Open();
        Execute(connection, "PRAGMA journal_mode = WAL;");
        Execute(connection, "CREATE TABLE IF NOT EXISTS schema_version (version INTEGER NOT NULL, applied_at TEXT NOT NULL);");
        using var transaction = connection.BeginTransaction();
        var current = CurrentVersion(connection, transaction);
        foreach (var (version, sql) in Migrations.All)
        {
            if (version <= current)
            {
                continue;
            }

            Execute(connection, sql, transaction);
            using var record = connection.CreateCommand();
            record.Transaction = transaction;
            record.CommandText = "INSERT INTO schema_version (version, applied_at) VALUES ($v, $t);";
            record.Parameters.AddWithValue("$v", version);
            record.Parameters.AddWithValue("$t", DateTimeOffset.UtcNow.ToString("O"));
            record.ExecuteNonQuery();
            current = version;
        }

        transaction.Commit();
        return current;
    }

    /// <summary>Writes the one row of <c>store_probe</c>; throws when the file cannot take a write (disk full, read-only).</summary>
    public void ProbeWrite()
    {
        using var connection = Open();
        using var command = connection.CreateCommand();
        command.CommandText = """
            INSERT INTO store_probe (id, written_at) VALUES (1, $at)
            ON CONFLICT(id) DO UPDATE SET written_at = excluded.written_at;
            """;
        command.Parameters.AddWithValue("$at", DateTimeOffset.UtcNow.ToString("O"));
        command.ExecuteNonQuery();
    }

    public int SchemaVersion()
    {
        using var connection = Open();
        return CurrentVersion(connection, null);
    }

    private static int CurrentVersion(SqliteConnection connection, SqliteTransaction? transaction)
    {
        using var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = "SELECT COALESCE(MAX(version), 0) FROM schema_version;";
        return Convert.ToInt32(command.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture);
    }

    private static void Execute(SqliteConnection connection, string sql, SqliteTransaction? transaction = null)
    {
        using var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = sql;
        command.ExecuteNonQuery();
    }
}
