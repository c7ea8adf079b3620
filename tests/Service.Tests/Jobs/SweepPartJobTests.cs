using Bitbudget.Service.Jobs;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.DependencyInjection;

namespace Bitbudget.Service.Tests.Jobs;

/// <summary>
/// One search spread over workers as sweep parts, on the real store and Hangfire of each backend with the fake
/// engine. The single-job run of the same search is the reference: same trials, same result.
/// </summary>
/// <remarks>Runs on each store backend: <see cref="OnSqlite"/> and <see cref="OnPostgres"/>.</remarks>
public abstract class SweepPartJobTests(StoreBackend backend) : IDisposable
{
    private readonly List<ServiceFactory> factories = [];
    private readonly List<string> databases = [];

    [Fact]
    public async Task ASearchInPartsOnTwoWorkersStoresEachTrialOnceAndTheResultOfOneJob()
    {
        var whole = Factory(workers: 1, parts: 1);
        var split = Factory(workers: 2, parts: 3);

        var (wholeId, wholeClient) = await RunAsync(whole, "parts");
        var (splitId, splitClient) = await RunAsync(split, "parts");

        // Every trial measured once across the workers, and the final job measured no sweep trial again.
        var measured = split.Engine.Measured["parts"].ToList();
        Assert.Equal(measured.Count, measured.Distinct().Count());
        Assert.Equal(1, split.Engine.Runs["parts"]);
        var parts = split.Services.GetRequiredService<SweepPartStore>().List(splitId);
        Assert.Equal(3, parts.Count);
        Assert.All(parts, p => Assert.True(p.Done));
        Assert.Equal(Keys(whole, wholeId), Keys(split, splitId));
        Assert.Equal(
            await (await wholeClient.GetAsync($"/v1/searches/{wholeId}/manifest")).Content.ReadAsStringAsync(),
            await (await splitClient.GetAsync($"/v1/searches/{splitId}/manifest")).Content.ReadAsStringAsync());
    }

    [Fact]
    public async Task APartWhoseWorkerDiedIsQueuedAgainWhenItsLeaseLapsesAndAnotherWorkerFinishesIt()
    {
        // No workers: the test runs each job itself, in the order a crash would leave them.
        var factory = Factory(workers: 0, parts: 2);
        var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync("died");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        var services = factory.Services;
        var parts = services.GetRequiredService<SweepPartStore>();

        await services.GetRequiredService<SearchJob>().RunAsync(id, CancellationToken.None);
        var dispatched = parts.List(id);
        Assert.Equal(2, dispatched.Count);
        Assert.All(dispatched, p => Assert.NotNull(p.JobId));

        // A worker took part 0 and was killed: its lease lapses with nobody renewing it.
        Assert.Equal(ClaimOutcome.Claimed, parts.TryClaim(id, 0, "killed-worker/1", TimeSpan.FromMilliseconds(-1)));
        services.GetRequiredService<SearchRecovery>().Run();
        var requeued = parts.List(id)[0];
        Assert.NotEqual(dispatched[0].JobId, requeued.JobId);
        Assert.Null(requeued.LeaseOwner);

        await services.GetRequiredService<SweepPartJob>().RunAsync(id, 1, CancellationToken.None);
        Assert.Equal("running", (await (await client.GetAsync($"/v1/searches/{id}")).JsonAsync()).GetProperty("state").GetString());
        await services.GetRequiredService<SweepPartJob>().RunAsync(id, 0, CancellationToken.None);
        // The last part queued the search's job again; run it as a worker would.
        await services.GetRequiredService<SearchJob>().RunAsync(id, CancellationToken.None);

        var search = await (await client.GetAsync($"/v1/searches/{id}")).JsonAsync();
        Assert.Equal("succeeded", search.GetProperty("state").GetString());
        Assert.All(parts.List(id), p => Assert.Equal(SweepPartJob.Worker, p.FinishedBy));
        var measured = factory.Engine.Measured["died"].ToList();
        Assert.Equal(measured.Count, measured.Distinct().Count());
    }

    public void Dispose()
    {
        foreach (var factory in factories)
        {
            factory.Dispose();
        }

        foreach (var database in databases)
        {
            TestPostgres.DropDatabase(database);
        }

        GC.SuppressFinalize(this);
    }

    private static List<string> Keys(ServiceFactory factory, string id) =>
        [.. new TrialStore(factory.Services.GetRequiredService<Database>(), id).LoadAll().Keys.Order(StringComparer.Ordinal)];

    private static async Task<(string Id, HttpClient Client)> RunAsync(ServiceFactory factory, string tag)
    {
        var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync(tag);
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        var done = await client.WaitForStateAsync(id, "succeeded", "failed", "canceled");
        Assert.Equal("succeeded", done.GetProperty("state").GetString());
        return (id, client);
    }

    private ServiceFactory Factory(int workers, int parts)
    {
        var settings = new Dictionary<string, string> { ["Bitbudget:SweepParts"] = parts.ToString(System.Globalization.CultureInfo.InvariantCulture) };
        if (backend == StoreBackend.Postgres)
        {
            var database = TestPostgres.CreateDatabase();
            databases.Add(database);
            settings["Bitbudget:Store"] = "postgres";
            settings["Bitbudget:ConnectionString"] = database;
        }

        var factory = new ServiceFactory(workers, configureKey: true, settings);
        factories.Add(factory);
        return factory;
    }

    public sealed class OnSqlite() : SweepPartJobTests(StoreBackend.Sqlite);

    public sealed class OnPostgres() : SweepPartJobTests(StoreBackend.Postgres);
}
