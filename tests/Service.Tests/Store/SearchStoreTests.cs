using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Store;

/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class SearchStoreTests(StoreBackend backend) : IDisposable
{
    private static readonly TimeSpan Lease = TimeSpan.FromMinutes(1);
    private readonly StoreSeed seed = new(backend);

    [Fact]
    public void OnlyOneRunHoldsASearchAtATime()
    {
        var search = seed.AddSearch("claim");

        Assert.Equal(ClaimOutcome.Claimed, seed.Searches.TryClaim(search.Id, "a", Lease));
        Assert.Equal(ClaimOutcome.Held, seed.Searches.TryClaim(search.Id, "b", Lease));
        Assert.Equal("running", seed.Searches.Find(search.Id)!.State);
        Assert.Equal(1, seed.Searches.Find(search.Id)!.Attempts);
    }

    [Fact]
    public void AnExpiredLeaseCanBeTakenOver()
    {
        var search = seed.AddSearch("expired");
        seed.Searches.TryClaim(search.Id, "crashed", TimeSpan.FromMilliseconds(-1));

        Assert.Equal(ClaimOutcome.Claimed, seed.Searches.TryClaim(search.Id, "next", Lease));
        Assert.False(seed.Searches.Report(search.Id, "crashed", Lease, "sweep", 1, 2, null));
        Assert.True(seed.Searches.Report(search.Id, "next", Lease, "sweep", 1, 2, 3.5));
        Assert.Equal(2, seed.Searches.Find(search.Id)!.Attempts);
    }

    [Fact]
    public void OnlyTheLeaseHolderCompletesAndTheResultIsWrittenOnce()
    {
        var search = seed.AddSearch("complete");
        seed.Searches.TryClaim(search.Id, "a", Lease);

        Assert.False(seed.Searches.Complete("b", Result(search.Id)));
        Assert.True(seed.Searches.Complete("a", Result(search.Id)));
        Assert.False(seed.Searches.Complete("a", Result(search.Id)));

        Assert.Equal(1, seed.Searches.CountResults(search.Id));
        Assert.Equal("succeeded", seed.Searches.Find(search.Id)!.State);
        Assert.Equal(ClaimOutcome.Final, seed.Searches.TryClaim(search.Id, "c", Lease));
    }

    [Fact]
    public void ACanceledSearchCannotBeCompletedOrFailed()
    {
        var search = seed.AddSearch("cancel");
        seed.Searches.TryClaim(search.Id, "a", Lease);

        Assert.True(seed.Searches.Cancel(search.Id));

        Assert.False(seed.Searches.Report(search.Id, "a", Lease, "sweep", 1, 2, null));
        Assert.False(seed.Searches.Complete("a", Result(search.Id)));
        Assert.False(seed.Searches.Fail(search.Id, "a", "x", "y"));
        Assert.False(seed.Searches.Cancel(search.Id));
        Assert.Equal("canceled", seed.Searches.Find(search.Id)!.State);
        Assert.Equal(0, seed.Searches.CountResults(search.Id));
    }

    [Fact]
    public void TheSameIdempotencyKeyGivesTheStoredSearch()
    {
        var first = seed.AddSearch("key");
        var (again, created) = seed.Searches.Create(first.ModelId, first.DatasetId, StoreSeed.Spec, "k1", "h");
        var (retry, createdAgain) = seed.Searches.Create(first.ModelId, first.DatasetId, StoreSeed.Spec, "k1", "h");

        Assert.True(created);
        Assert.False(createdAgain);
        Assert.Equal(again.Id, retry.Id);
        Assert.Equal(StoreSeed.Spec.Bits, retry.Spec.Bits);
        Assert.Equal(StoreSeed.Spec.Budget, retry.Spec.Budget);
    }

    public void Dispose()
    {
        seed.Dispose();
        GC.SuppressFinalize(this);
    }

    private static ResultRecord Result(string id) =>
        new(id, true, "ok", new string('a', 64), null, new string('b', 64), new string('c', 64), 100, 4, 8, 30, 29.5, 12);

    public sealed class OnSqlite() : SearchStoreTests(StoreBackend.Sqlite);

    public sealed class OnPostgres() : SearchStoreTests(StoreBackend.Postgres);
}
