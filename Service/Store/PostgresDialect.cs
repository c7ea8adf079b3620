using System.Data.Common;
using Npgsql;

namespace Bitbudget.Service.Store;

/// <summary>A shared PostgreSQL database, for an API and workers on several machines.</summary>
internal sealed class PostgresDialect : StoreDialect
{
    /// <summary>Any fixed number: the advisory lock every process takes around migrating.</summary>
    private const long MigrationLock = 0x6269_7462_7564_6765;

    // PostgreSQL error classes (postgresql.org/docs/current/errcodes-appendix.html): 08 connection exception,
    // 53 insufficient resources (disk full 53100), 57P0x the server shutting down, 25006 read-only transaction.
    private static readonly string[] StorageStates = ["08", "53", "57P01", "57P02", "57P03", "25006"];

    private readonly NpgsqlDataSource source;

    public PostgresDialect(string connectionString)
    {
        var builder = new NpgsqlConnectionStringBuilder(connectionString);
        Location = $"postgres://{builder.Host}:{builder.Port}/{builder.Database}";
        source = NpgsqlDataSource.Create(builder);
    }

    public override string Name => "postgres";

    public override string Location { get; }

    public override string InsertOrder => "seq";

    public override DbConnection Open() => source.OpenConnection();

    public override void LockForMigration(DbConnection connection, DbTransaction transaction)
    {
        using var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = $"SELECT pg_advisory_xact_lock({MigrationLock});";
        command.ExecuteNonQuery();
    }

    public override string SqlOf(Migration migration) => migration.Postgres ?? migration.Sqlite;

    /// <summary>True when the server is unreachable, shutting down, out of disk or read-only: the machine's fault, not the search's.</summary>
    public static bool IsStorageFault(NpgsqlException exception) =>
        exception is PostgresException { SqlState: var state } ? StorageStates.Any(state.StartsWith)
        : exception.InnerException is System.Net.Sockets.SocketException or IOException or TimeoutException || exception.IsTransient;
}
