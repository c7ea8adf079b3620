using Bitbudget.Search.Manifest;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Store;

/// <summary>
/// The rule for reused trials, with the real engine on the demo over the store: a search that reuses the sweep of an
/// earlier search with the same trial context lists every trial its result rests on, as many as its manifest's
/// <c>trials</c>, each reused one naming the search that measured it; the earlier search's trials and the duration
/// histogram (trials measured) are left as they were.
/// </summary>
/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class ReusedTrialsTests(StoreBackend backend, DemoFolderFixture demo) : IDisposable
{
    private const string Worker = "worker-1";

    // The demo has 4 layers; bits 2,4,8 make 12 sensitivity trials.
    private const int SweepTrials = 12;

    private readonly StoreSeed seed = new(backend);

    [Fact]
    public void AReusingSearchListsEveryTrialItsManifestCountsAndLeavesTheEarlierSearchAsItWas()
    {
        var earlier = seed.AddSearch("earlier").Id;
        var first = Run(new TrialStore(seed.Database, earlier, measuredBy: Worker), 25);
        var earlierTrials = Everything(earlier);
        var measuredBefore = new TrialStatistics(seed.Database).DurationHistogram().Count;
        Assert.Equal(first.Trials, earlierTrials.Count);
        Assert.All(earlierTrials, t => Assert.Null(t.ReusedFrom));

        var later = seed.AddSearch("later").Id;
        var laterStore = new TrialStore(seed.Database, later, [earlier], Worker);
        var second = Run(laterStore, 15);

        var (total, reused, items) = new TrialStore(seed.Database, later).Page(0, 1000);
        Assert.Equal(second.Trials, total);
        Assert.Equal(SweepTrials, reused);
        Assert.Equal(second.Trials, laterStore.LoadAll().Count);

        // The reused trials are the earlier search's measurements, unchanged, each naming it; the rest are this search's own.
        var sweep = earlierTrials.Where(t => t.Kind == "sensitivity").ToList();
        Assert.Equal(SweepTrials, sweep.Count);
        Assert.Equal(Json(sweep.Select(t => t with { ReusedFrom = earlier })), Json(items.Where(t => t.ReusedFrom is not null)));
        Assert.All(items.Where(t => t.ReusedFrom is null), t => Assert.NotEqual("sensitivity", t.Kind));
        var measured = items.Count(t => t.ReusedFrom is null);
        Assert.Equal(measured, laterStore.CountByWorker()[Worker]);

        // Nothing stored changed: the earlier search's trials are as they were, and only what was measured is counted.
        Assert.Equal(Json(earlierTrials), Json(Everything(earlier)));
        Assert.Equal(measuredBefore + measured, new TrialStatistics(seed.Database).DurationHistogram().Count);

        // A third search reusing both names the search that measured each trial, not the one that reused it.
        var third = seed.AddSearch("third").Id;
        var thirdResult = Run(new TrialStore(seed.Database, third, [earlier, later], Worker), 20);
        var thirdPage = new TrialStore(seed.Database, third).Page(0, 1000);
        Assert.Equal(thirdResult.Trials, thirdPage.Total);
        Assert.Equal(SweepTrials, thirdPage.Reused);
        Assert.All(thirdPage.Items.Where(t => t.ReusedFrom is not null), t => Assert.Equal(earlier, t.ReusedFrom));
    }

    public void Dispose()
    {
        seed.Dispose();
        GC.SuppressFinalize(this);
    }

    /// <summary>Each trial as the store writes it (records holding lists compare by reference; their JSON compares every field).</summary>
    private static List<string> Json(IEnumerable<TrialRecord> trials) => [.. trials.Select(StoreJson.Write)];

    private List<TrialRecord> Everything(string searchId) => [.. new TrialStore(seed.Database, searchId).Page(0, 1000).Items];

    /// <summary>A demo search at bits 2,4,8 with an SQNR budget through the service's engine adapter; the manifest it wrote.</summary>
    private AssignmentManifest Run(TrialStore store, double sqnr)
    {
        var result = new EngineAdapter(Options.Create(new BitbudgetOptions())).RunSearch(
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)),
            HiveMonitorScenario.ModelFileName,
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)),
            new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, sqnr), [2, 4, 8]),
            store,
            new Progress<SearchProgress>(),
            CancellationToken.None);
        return ManifestJson.Deserialize(result.ManifestJson);
    }

    [Collection(DemoFolderCollection.Name)]
    public sealed class OnSqlite(DemoFolderFixture demo) : ReusedTrialsTests(StoreBackend.Sqlite, demo);

    [Collection(DemoFolderCollection.Name)]
    public sealed class OnPostgres(DemoFolderFixture demo) : ReusedTrialsTests(StoreBackend.Postgres, demo);
}
