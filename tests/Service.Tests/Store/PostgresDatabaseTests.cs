using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

/// <summary>What PostgreSQL's store does beyond SQLite's: several processes start (and migrate) at once.</summary>
public sealed class PostgresDatabaseTests : IDisposable
{
    private readonly string connectionString = TestPostgres.CreateDatabase();

    [Fact]
    public async Task ProcessesMigratingAtOnceApplyEachStepOnce()
    {
        // An API and workers started together by compose each migrate the shared database on start.
        var versions = await Task.WhenAll(Enumerable.Range(0, 4)
            .Select(_ => Task.Run(() => new Database(new PostgresDialect(connectionString)).Migrate())));

        var latest = Migrations.All.Max(m => m.Version);
        Assert.All(versions, v => Assert.Equal(latest, v));
        var database = new Database(new PostgresDialect(connectionString));
        Assert.Equal(Migrations.All.Count, Scalar(database, "SELECT COUNT(*) FROM schema_version;"));
        Assert.Equal(latest, database.SchemaVersion());
    }

    [Fact]
    public void SchemaHasEveryTableOfTheSqliteSchema()
    {
        var postgres = new Database(new PostgresDialect(connectionString));
        postgres.Migrate();
        using var sqlite = new StoreSeed();

        // The same tables and the same columns on both: one code path reads and writes them.
        Assert.Equal(Columns(sqlite.Database, "SELECT m.name || '.' || p.name FROM sqlite_master m, pragma_table_info(m.name) p WHERE m.type = 'table'"),
            Columns(postgres, "SELECT table_name || '.' || column_name FROM information_schema.columns WHERE table_schema = 'public' AND column_name <> 'seq'"));
    }

    [Fact]
    public void StepThreeRenamesTheClipSettingAndTrialKeysOnPostgres()
    {
        var database = new Database(new PostgresDialect(connectionString));
        using (var connection = database.Open())
        using (var command = connection.Command("CREATE TABLE schema_version (version INTEGER NOT NULL, applied_at TEXT NOT NULL);"
            + PostgresSchema.Step1 + PostgresSchema.Step2 + """
            INSERT INTO schema_version VALUES (1, 'x'), (2, 'x');
            INSERT INTO models (id, sha256, name, bytes, summary_json, created_at) VALUES ('mdl_1', 'sha', 'm', 1, '{}', 'x');
            INSERT INTO datasets (id, sha256, bytes, summary_json, created_at) VALUES ('dst_1', 'sha', 1, '{}', 'x');
            INSERT INTO searches (id, model_id, dataset_id, settings_json, state, request_hash, created_at) VALUES ('srch_1', 'mdl_1', 'dst_1',
                '{"budget":{"metric":"sqnr","atLeast":30},"bits":[4,8],"method":"knapsack","scheme":"asymmetric","granularity":"per-tensor","calibration":"mse-optimal","activations":false,"pin":{},"exclude":[],"storage":"container"}',
                'running', 'h', '2026-01-01T00:00:00Z');
            INSERT INTO trials (search_id, key, kind, layer, bits, metrics_json, duration_ms, created_at)
                VALUES ('srch_1', 'sensitivity/fc/4b-asymmetric-pertensor-mseoptimal', 'sensitivity', 'fc', 4, '{}', 5, 'x');
            """))
        {
            command.ExecuteNonQuery();
        }

        database.Migrate();

        Assert.Equal("mse-optimal", new SearchStore(database).Find("srch_1")!.Spec.Clip);
        Assert.Equal(["sensitivity/fc/4b-asymmetric-per-tensor-mse-optimal"], new TrialStore(database, "srch_1").LoadAll().Keys);
    }

    public void Dispose() => TestPostgres.DropDatabase(connectionString);

    private static SortedSet<string> Columns(Database database, string sql)
    {
        using var connection = database.Open();
        using var command = connection.Command(sql);
        using var reader = command.ExecuteReader();
        var columns = new SortedSet<string>(StringComparer.Ordinal);
        while (reader.Read())
        {
            columns.Add(reader.GetString(0));
        }

        return columns;
    }

    private static long Scalar(Database database, string sql)
    {
        using var connection = database.Open();
        using var command = connection.Command(sql);
        return command.ScalarLong();
    }
}
