using System.Data.Common;

namespace Bitbudget.Service.Store;

/// <summary>Opens connections to the store's database (SQLite by default, or a shared PostgreSQL) and brings its schema up to date.</summary>
internal sealed class Database(StoreDialect dialect)
{
    /// <summary>The embedded SQLite store in one file.</summary>
    public Database(string path)
        : this(new SqliteDialect(path))
    {
    }

    public StoreDialect Dialect { get; } = dialect;

    /// <summary>Where the store lives, for logs: the SQLite file or the PostgreSQL host and database.</summary>
    public string Location => Dialect.Location;

    public DbConnection Open() => Dialect.Open();

    /// <summary>Applies every migration newer than the stored version; safe to run again, and from several processes at once.</summary>
    /// <returns>The schema version after migrating.</returns>
    public int Migrate()
    {
        using var connection = Open();
        Dialect.PrepareForMigration(connection);
        using (var create = connection.Command("CREATE TABLE IF NOT EXISTS schema_version (version INTEGER NOT NULL, applied_at TEXT NOT NULL);"))
        {
            try
            {
                create.ExecuteNonQuery();
            }
            catch (DbException) when (Dialect is PostgresDialect)
            {
                // Two processes creating the table at once: PostgreSQL's IF NOT EXISTS can still collide on the
                // catalog; the other one made it.
            }
        }

        using var transaction = connection.BeginTransaction();
        Dialect.LockForMigration(connection, transaction);
        var current = CurrentVersion(connection, transaction);
        foreach (var migration in Migrations.All)
        {
            if (migration.Version <= current)
            {
                continue;
            }

            using (var step = connection.Command(Dialect.SqlOf(migration), transaction))
            {
                step.ExecuteNonQuery();
            }

            using var record = connection.Command("INSERT INTO schema_version (version, applied_at) VALUES (@v, @t);", transaction)
                .With("@v", migration.Version)
                .With("@t", DateTimeOffset.UtcNow.ToString("O"));
            record.ExecuteNonQuery();
            current = migration.Version;
        }

        transaction.Commit();
        return current;
    }

    /// <summary>Writes the one row of <c>store_probe</c>; throws when the database cannot take a write (disk full, read-only).</summary>
    public void ProbeWrite()
    {
        using var connection = Open();
        using var command = connection.Command("""
            INSERT INTO store_probe (id, written_at) VALUES (1, @at)
            ON CONFLICT(id) DO UPDATE SET written_at = excluded.written_at;
            """).With("@at", DateTimeOffset.UtcNow.ToString("O"));
        command.ExecuteNonQuery();
    }

    public int SchemaVersion()
    {
        using var connection = Open();
        return CurrentVersion(connection, null);
    }

    private static int CurrentVersion(DbConnection connection, DbTransaction? transaction)
    {
        using var command = connection.Command("SELECT COALESCE(MAX(version), 0) FROM schema_version;", transaction);
        return (int)command.ScalarLong();
    }
}
