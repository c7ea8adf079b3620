using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class TrialStoreTests(StoreBackend backend) : IDisposable
{
    private readonly StoreSeed seed = new(backend);

    [Fact]
    public void SavingAStoredKeyAgainChangesNothing()
    {
        var search = seed.AddSearch("conflict");
        var trials = new TrialStore(seed.Database, search.Id);
        var first = Trial("sensitivity/fc/4", 24.1);

        trials.Save(first);
        trials.Save(Trial("sensitivity/fc/4", 99.0));

        var stored = trials.LoadAll();
        Assert.Single(stored);
        Assert.Equal(first, stored["sensitivity/fc/4"]);
        Assert.Equal(1, trials.Page(0, 10).Total);
    }

    [Fact]
    public void TrialsOfDifferentSearchesAreKeptApart()
    {
        var a = new TrialStore(seed.Database, seed.AddSearch("a").Id);
        var b = new TrialStore(seed.Database, seed.AddSearch("b").Id);

        a.Save(Trial("k", 1));
        b.Save(Trial("k", 2));
        b.Save(Trial("k2", 3));

        Assert.Equal(1, a.LoadAll()["k"].Metrics.SqnrDb);
        Assert.Equal(2, b.LoadAll()["k"].Metrics.SqnrDb);
        Assert.Equal(2, b.LoadAll().Count);
    }

    [Fact]
    public void EveryFieldRoundTripsIncludingInfiniteSqnr()
    {
        var trials = new TrialStore(seed.Database, seed.AddSearch("fields").Id);
        var validation = new TrialRecord("validation/abc", "validation", null, null, "abc", new MetricSet(0, double.PositiveInfinity, 1, 0, 1, 0.75), 12.5);
        var sensitivity = new TrialRecord("s", "sensitivity", "conv1", 3, null, new MetricSet(0.01, 20, 0.9, 0.02, 0.99, null), 3.25);

        trials.Save(validation);
        trials.Save(sensitivity);

        var stored = trials.LoadAll();
        Assert.Equal(validation, stored["validation/abc"]);
        Assert.Equal(sensitivity, stored["s"]);
    }

    [Fact]
    public void PagesFollowTheOrderOfSaving()
    {
        var trials = new TrialStore(seed.Database, seed.AddSearch("pages").Id);
        foreach (var i in Enumerable.Range(0, 7))
        {
            trials.Save(Trial($"t{(7 - i).ToString(System.Globalization.CultureInfo.InvariantCulture)}", i));
        }

        var (total, _, items) = trials.Page(2, 3);

        Assert.Equal(7, total);
        Assert.Equal(["t5", "t4", "t3"], items.Select(t => t.Key));
    }

    public void Dispose()
    {
        seed.Dispose();
        GC.SuppressFinalize(this);
    }

    private static TrialRecord Trial(string key, double sqnr) =>
        new(key, "sensitivity", "fc", 4, null, new MetricSet(Math.Pow(10, -sqnr / 10), sqnr, 1, 0, 1, null), 1.5);

    public sealed class OnSqlite() : TrialStoreTests(StoreBackend.Sqlite);

    public sealed class OnPostgres() : TrialStoreTests(StoreBackend.Postgres);
}
