using Bitbudget.Service.Engine;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class SweepPartStoreTests(StoreBackend backend) : IDisposable
{
    private static readonly TimeSpan Lease = TimeSpan.FromMinutes(1);
    private readonly StoreSeed seed = new(backend);

    [Fact]
    public void PartsAreStoredOnceWithTheirLayersAndTheSweepTotal()
    {
        var search = Running("create");
        var parts = new SweepPartStore(seed.Database);

        Assert.True(parts.Create(search.Id, Plan));
        Assert.False(parts.Create(search.Id, [[new LayerTrials("other", 9)]]));

        var stored = parts.List(search.Id);
        Assert.Equal([0, 1], stored.Select(p => p.Part));
        Assert.Equal(["conv1", "conv2"], stored[0].Layers);
        Assert.Equal([5, 2], stored.Select(p => p.Trials));
        Assert.Equal(7, seed.Searches.Find(search.Id)!.Total);
    }

    [Fact]
    public void APartIsHeldByOneRunUntilItsLeaseLapses()
    {
        var search = Running("claim");
        var parts = new SweepPartStore(seed.Database);
        parts.Create(search.Id, Plan);

        Assert.Equal(ClaimOutcome.Claimed, parts.TryClaim(search.Id, 0, "a", TimeSpan.FromMilliseconds(-1)));
        // a's lease has lapsed (a worker killed mid-part): b takes the part over and a can no longer renew it.
        Assert.Equal(ClaimOutcome.Claimed, parts.TryClaim(search.Id, 0, "b", Lease));
        Assert.Equal(ClaimOutcome.Held, parts.TryClaim(search.Id, 0, "c", Lease));
        Assert.False(parts.Renew(search.Id, 0, "a", Lease));
        Assert.True(parts.Renew(search.Id, 0, "b", Lease));
        Assert.Equal(2, parts.List(search.Id)[0].Attempts);
    }

    [Fact]
    public void OnlyTheLastPartToFinishSeesNoneLeftAndASecondFinishCountsNothing()
    {
        var search = Running("finish");
        var parts = new SweepPartStore(seed.Database);
        parts.Create(search.Id, [[new LayerTrials("a", 1)], [new LayerTrials("b", 1)], [new LayerTrials("c", 1)], [new LayerTrials("d", 1)]]);

        // Four workers finishing at once: the count-down must hand exactly one of them a zero.
        var left = Enumerable.Range(0, 4).AsParallel().Select(p => parts.Finish(search.Id, p, $"w{p}")).ToList();
        var again = parts.Finish(search.Id, 2, "late");

        Assert.Equal([0, 1, 2, 3], left.Select(l => l!.Value).Order());
        Assert.Null(again);
        Assert.Equal("w2", parts.List(search.Id)[2].FinishedBy);
        Assert.Equal(ClaimOutcome.Final, parts.TryClaim(search.Id, 2, "x", Lease));
        Assert.Empty(parts.ListPending());
    }

    [Fact]
    public void APartOfACanceledSearchCannotBeTakenOrRenewed()
    {
        var search = Running("cancel");
        var parts = new SweepPartStore(seed.Database);
        parts.Create(search.Id, Plan);
        parts.TryClaim(search.Id, 0, "a", Lease);

        seed.Searches.Cancel(search.Id);

        Assert.False(parts.Renew(search.Id, 0, "a", Lease));
        Assert.NotEqual(ClaimOutcome.Claimed, parts.TryClaim(search.Id, 1, "b", Lease));
        Assert.Empty(parts.ListPending());
    }

    [Fact]
    public void RenewingReportsTheStoredSweepTrialsAsTheSearchsProgress()
    {
        var search = Running("progress");
        var parts = new SweepPartStore(seed.Database);
        parts.Create(search.Id, Plan);
        seed.Searches.Release(search.Id, "owner");
        parts.TryClaim(search.Id, 1, "w", Lease);
        var trials = new TrialStore(seed.Database, search.Id, measuredBy: "worker-1");
        trials.Save(new("reference", "reference", null, null, null, new(0, double.PositiveInfinity, 1, 0, 1, null), 1));
        trials.Save(new("sensitivity/conv3/4", "sensitivity", "conv3", 4, null, new(0.1, 10, 1, 0, 1, null), 1));

        Assert.True(parts.Renew(search.Id, 1, "w", Lease));

        var stored = seed.Searches.Find(search.Id)!;
        Assert.Equal((1, 7, "sweep"), (stored.Done, stored.Total, stored.Stage));
        Assert.Equal(new Dictionary<string, int> { ["worker-1"] = 2 }, trials.CountByWorker());
    }

    public void Dispose()
    {
        seed.Dispose();
        GC.SuppressFinalize(this);
    }

    private static IReadOnlyList<IReadOnlyList<LayerTrials>> Plan { get; } =
        [[new LayerTrials("conv1", 3), new LayerTrials("conv2", 2)], [new LayerTrials("conv3", 2)]];

    private SearchRecord Running(string tag)
    {
        var search = seed.AddSearch(tag);
        seed.Searches.TryClaim(search.Id, "owner", Lease);
        return search;
    }

    public sealed class OnSqlite() : SweepPartStoreTests(StoreBackend.Sqlite);

    public sealed class OnPostgres() : SweepPartStoreTests(StoreBackend.Postgres);
}
