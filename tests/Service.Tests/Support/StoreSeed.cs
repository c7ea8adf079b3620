using Bitbudget.Service.Engine;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// A migrated store, on SQLite in a temporary folder or on a fresh PostgreSQL database of its own, with rows the
/// store tests build on.
/// </summary>
internal sealed class StoreSeed : IDisposable
{
    private readonly string? postgres;

    public StoreSeed(StoreBackend backend = StoreBackend.Sqlite)
    {
        Backend = backend;
        Folder = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(Folder);
        if (backend == StoreBackend.Postgres)
        {
            postgres = TestPostgres.CreateDatabase();
            Database = new Database(new PostgresDialect(postgres));
        }
        else
        {
            Database = new Database(Path.Combine(Folder, "store.db"));
        }

        Database.Migrate();
        Catalog = new CatalogStore(Database);
        Searches = new SearchStore(Database);
    }

    public StoreBackend Backend { get; }

    public string Folder { get; }

    public Database Database { get; }

    public CatalogStore Catalog { get; }

    public SearchStore Searches { get; }

    public static SearchSpec Spec { get; } = new(new BudgetSpec("sqnr", AtLeast: 30), [4, 8], "knapsack", "symmetric", "per-channel", "min-max", false, new Dictionary<string, int>(), []);

    /// <summary>Adds a model, a dataset and a queued search on them.</summary>
    public SearchRecord AddSearch(string tag)
    {
        var model = Catalog.AddModel(new ModelSummary(Guid.NewGuid().ToString("N") + Guid.NewGuid().ToString("N"), tag, 10, 13, [], [], [new LayerSummary("fc", "Gemm", "w", [10], 10, 0, false)], [])).Model;
        var dataset = Catalog.AddDataset(new DatasetSummary(Guid.NewGuid().ToString("N") + Guid.NewGuid().ToString("N"), [], 4, false), 10).Dataset;
        return Searches.Create(model.Id, dataset.Id, Spec, null, "hash").Search;
    }

    public void Dispose()
    {
        Microsoft.Data.Sqlite.SqliteConnection.ClearAllPools();
        Directory.Delete(Folder, recursive: true);
        if (postgres is not null)
        {
            TestPostgres.DropDatabase(postgres);
        }
    }
}
