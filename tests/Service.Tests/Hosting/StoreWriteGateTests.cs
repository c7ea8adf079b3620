using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>
/// A data folder that cannot be written (here: the blob staging folder replaced by a file, which refuses
/// every new file even to root, as a full or read-only disk would) is reported by /healthz and answered
/// 503 store-unavailable to writes, after the API key check; reads keep working, and the first write after
/// the fix goes through. Before: /healthz said ok (it only read) and uploads got a generic 500.
/// </summary>
public sealed class StoreWriteGateTests : IDisposable
{
    private readonly ServiceFactory factory = new();
    private readonly HttpClient client;

    public StoreWriteGateTests() => client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task AnUnwritableStoreIsReportedAndRefusesWritesUntilItIsWritableAgain()
    {
        var (modelId, _) = await client.UploadAsync("before");
        var staging = Path.Combine(factory.DataFolder, "blobs", "tmp");
        Directory.Delete(staging, recursive: true);
        await File.WriteAllTextAsync(staging, "not a folder");

        // The first write meets the fault itself: 503 with a type, not a 500.
        var upload = await client.PostBytesAsync("/v1/models?name=during", FakeSearchEngine.Model("during"));
        var problem = await upload.AssertProblemAsync(HttpStatusCode.ServiceUnavailable, "store-unavailable");
        Assert.Contains("blob folder cannot be written", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
        Assert.Equal(TimeSpan.FromSeconds(30), upload.Headers.RetryAfter?.Delta);

        var health = await client.GetAsync("/healthz");
        var unhealthy = await health.AssertProblemAsync(HttpStatusCode.ServiceUnavailable, "store-unavailable");
        Assert.StartsWith("unwritable: ", unhealthy.GetProperty("store").GetString(), StringComparison.Ordinal);

        // Now known unwritable: writes are refused before their body is read, but only after the key check.
        await (await client.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset("during"))).AssertProblemAsync(HttpStatusCode.ServiceUnavailable, "store-unavailable");
        using (var anonymous = factory.CreateClient())
        {
            await (await anonymous.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset("during"))).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
        }

        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync($"/v1/models/{modelId}")).StatusCode);

        File.Delete(staging);
        Directory.CreateDirectory(staging);

        var after = await client.PostBytesAsync("/v1/models?name=after", FakeSearchEngine.Model("after"));
        Assert.Equal(HttpStatusCode.Created, after.StatusCode);
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/healthz")).StatusCode);
    }

    public void Dispose()
    {
        client.Dispose();
        factory.Dispose();
    }
}
