using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

/// <summary>
/// The metrics counters: kept by triggers as trials and searches are written, so a scrape never reads the
/// trials (or searches) table. Checked against the histogram computed here directly from the durations.
/// </summary>
/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class TrialStatisticsTests(StoreBackend backend) : IDisposable
{
    // Bucket edges (inclusive upper bounds, Prometheus "le") and a hair above them, plus one past the last bound.
    private static readonly double[] Durations = [0.5, 10, 10.001, 25, 99.9, 100, 2500, 2500.5, 30000, 30000.1, 125000];

    private readonly StoreSeed seed = new(backend);

    [Fact]
    public void HistogramMatchesTheDurationsCountedDirectly()
    {
        var trials = new TrialStore(seed.Database, seed.AddSearch("histogram").Id);
        for (var i = 0; i < Durations.Length; i++)
        {
            trials.Save(Trial($"k{i}", Durations[i]));
        }

        // A key stored again (a rerun) is ignored by the insert, and so by the counters.
        trials.Save(Trial("k0", 7));

        var (cumulative, count, sumSeconds) = new TrialStatistics(seed.Database).DurationHistogram();

        Assert.Equal(Durations.Length, count);
        Assert.Equal(Durations.Sum() / 1000, sumSeconds, 9);
        for (var i = 0; i < TrialStatistics.BucketsSeconds.Count; i++)
        {
            var bound = TrialStatistics.BucketsSeconds[i] * 1000;
            Assert.True(Durations.Count(d => d <= bound) == cumulative[i], $"le={TrialStatistics.BucketsSeconds[i]}: {cumulative[i]}");
        }

        Assert.Equal(Durations.Length, cumulative[^1]);
    }

    [Fact]
    public void AScrapeReadsNeitherTheTrialsNorTheSearchesTable()
    {
        var search = seed.AddSearch("no-scan");
        var trials = new TrialStore(seed.Database, search.Id);
        trials.Save(Trial("a", 3));
        trials.Save(Trial("b", 40));
        seed.Searches.Cancel(search.Id);
        seed.AddSearch("queued");

        // Were either table scanned, the scrape would now fail with "no such table".
        Execute("ALTER TABLE trials RENAME TO trials_hidden; ALTER TABLE searches RENAME TO searches_hidden;");

        var (cumulative, count, _) = new TrialStatistics(seed.Database).DurationHistogram();
        var states = seed.Searches.CountByState();
        Assert.Equal(2, count);
        Assert.Equal(1, cumulative[0]);
        Assert.Equal(1, states["canceled"]);
        Assert.Equal(1, states["queued"]);
        Assert.Equal(0, states["running"]);
    }

    [Fact]
    public void SearchCountsFollowEveryStateChange()
    {
        var a = seed.AddSearch("a");
        var b = seed.AddSearch("b");
        Assert.Equal(2, seed.Searches.CountByState()["queued"]);

        seed.Searches.TryClaim(a.Id, "worker", TimeSpan.FromMinutes(1));
        seed.Searches.Report(a.Id, "worker", TimeSpan.FromMinutes(1), "sweep", 1, 2, null);
        seed.Searches.Fail(a.Id, "worker", "search-crashed", "boom");
        seed.Searches.Cancel(b.Id);

        var states = seed.Searches.CountByState();
        Assert.Equal(0, states["queued"]);
        Assert.Equal(0, states["running"]);
        Assert.Equal(1, states["failed"]);
        Assert.Equal(1, states["canceled"]);
        Assert.Equal(CountDirectly(), states.Where(kv => kv.Value > 0).ToDictionary());
    }

    [Fact]
    public void MigrationSeedsTheCountersFromRowsStoredBeforeIt()
    {
        var folder = Path.Combine(seed.Folder, "old");
        Directory.CreateDirectory(folder);
        var old = new Database(Path.Combine(folder, "store.db"));
        using (var connection = old.Open())
        using (var command = connection.CreateCommand())
        {
            // A store as version 1 left it, with a search and three trials.
            command.CommandText = "CREATE TABLE schema_version (version INTEGER NOT NULL, applied_at TEXT NOT NULL);"
                + Migrations.All.Single(m => m.Version == 1).Sqlite
                + """
                INSERT INTO schema_version VALUES (1, '2026-01-01T00:00:00Z');
                INSERT INTO models VALUES ('mdl_1', 'sha', 'm', 1, '{}', '2026-01-01T00:00:00Z');
                INSERT INTO datasets VALUES ('dst_1', 'sha', 1, '{}', '2026-01-01T00:00:00Z');
                INSERT INTO searches (id, model_id, dataset_id, settings_json, state, request_hash, created_at)
                    VALUES ('srch_1', 'mdl_1', 'dst_1', '{}', 'succeeded', 'h', '2026-01-01T00:00:00Z');
                INSERT INTO trials VALUES ('srch_1', 'a', 'reference', NULL, NULL, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'b', 'sensitivity', NULL, NULL, NULL, '{}', 60, 'x');
                INSERT INTO trials VALUES ('srch_1', 'c', 'sensitivity', NULL, NULL, NULL, '{}', 60000, 'x');
                INSERT INTO results VALUES ('srch_1', 1, 'ok', 'm', NULL, 's', 'f', 10, 4.0, 8.0, 30.5, 31.5, 3, 'x');
                """;
            command.ExecuteNonQuery();
        }

        old.Migrate();

        var (cumulative, count, sumSeconds) = new TrialStatistics(old).DurationHistogram();
        Assert.Equal(3, count);
        Assert.Equal(60.065, sumSeconds, 9);
        Assert.Equal(1, cumulative[0]);
        Assert.Equal(2, cumulative[4]);
        Assert.Equal(2, cumulative[^2]);
        Assert.Equal(1, new SearchStore(old).CountByState()["succeeded"]);
        Assert.Equal(31.5, new SearchStore(old).FindResult("srch_1")!.Measured);
    }

    public void Dispose()
    {
        seed.Dispose();
        GC.SuppressFinalize(this);
    }

    private static TrialRecord Trial(string key, double durationMs) =>
        new(key, "sensitivity", "fc", 4, null, new MetricSet(0.01, 20, 1, 0, 1, null), durationMs);

    private Dictionary<string, long> CountDirectly()
    {
        using var connection = seed.Database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = "SELECT state, COUNT(*) FROM searches GROUP BY state;";
        using var reader = command.ExecuteReader();
        var counts = new Dictionary<string, long>(StringComparer.Ordinal);
        while (reader.Read())
        {
            counts[reader.GetString(0)] = reader.GetInt64(1);
        }

        return counts;
    }

    private void Execute(string sql)
    {
        using var connection = seed.Database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        command.ExecuteNonQuery();
    }

    public sealed class OnSqlite() : TrialStatisticsTests(StoreBackend.Sqlite);

    public sealed class OnPostgres() : TrialStatisticsTests(StoreBackend.Postgres);
}
