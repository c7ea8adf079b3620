using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

public sealed class DatabaseTests : IDisposable
{
    private readonly StoreSeed seed = new();

    [Fact]
    public void MigratingAgainChangesNothing()
    {
        var again = seed.Database.Migrate();
        var third = new Database(seed.Database.Location).Migrate();

        Assert.Equal(Migrations.All.Max(m => m.Version), again);
        Assert.Equal(again, third);
        Assert.Equal(Migrations.All.Count, Scalar("SELECT COUNT(*) FROM schema_version;"));
    }

    [Fact]
    public void SchemaHasEveryTableAndTheStoreRunsInWalMode()
    {
        using var connection = seed.Database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = "PRAGMA journal_mode;";
        Assert.Equal("wal", command.ExecuteScalar());
        foreach (var table in new[] { "models", "datasets", "searches", "trials", "results", "schema_version" })
        {
            Assert.Equal(1, Scalar($"SELECT COUNT(*) FROM sqlite_master WHERE type = 'table' AND name = '{table}';"));
        }
    }

    [Fact]
    public void MigrationKeepsExistingRows()
    {
        var search = seed.AddSearch("keep");

        seed.Database.Migrate();

        Assert.Equal(search.Id, seed.Searches.Find(search.Id)?.Id);
    }

    public void Dispose() => seed.Dispose();

    private long Scalar(string sql)
    {
        using var connection = seed.Database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        return (long)command.ExecuteScalar()!;
    }
}
