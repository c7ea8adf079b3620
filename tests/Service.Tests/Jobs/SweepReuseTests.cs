using System.Text.Json;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Jobs;

/// <summary>
/// The service, with the real engine, does not sweep twice: a second search on the same model, dataset and
/// quantization settings with only another budget measures its validation trials and nothing else, and its
/// sensitivities equal the first search's; a search with another scheme sweeps in full.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class SweepReuseTests(DemoFolderFixture demo)
{
    // The demo has 4 layers; bits 2,4,8 make 12 sensitivity trials.
    private const int SweepTrials = 12;

    [Fact]
    public async Task ASecondSearchWithAnotherBudgetMeasuresOnlyItsValidationTrials()
    {
        using var factory = new RealEngineServiceFactory(workers: 1);
        using var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync(
            "hive-monitor.onnx",
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)),
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));

        var first = await RunAsync(client, new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 25 }, bits = new[] { 2, 4, 8 } });
        var second = await RunAsync(client, new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 15 }, bits = new[] { 2, 4, 8 } });
        var otherScheme = await RunAsync(client, new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 15 }, bits = new[] { 2, 4, 8 }, scheme = "asymmetric" });

        Assert.Equal(SweepTrials, (await KindsAsync(client, first)).Count(k => k == "sensitivity"));
        var measuredBySecond = await KindsAsync(client, second);
        Assert.DoesNotContain("sensitivity", measuredBySecond);
        Assert.Contains("validation", measuredBySecond);
        Assert.Equal(SweepTrials, (await KindsAsync(client, otherScheme)).Count(k => k == "sensitivity"));

        Assert.Equal(await client.GetStringAsync($"/v1/searches/{first}/sensitivity"), await client.GetStringAsync($"/v1/searches/{second}/sensitivity"));
        Assert.NotEqual(await client.GetStringAsync($"/v1/searches/{first}/sensitivity"), await client.GetStringAsync($"/v1/searches/{otherScheme}/sensitivity"));
    }

    private static async Task<string> RunAsync(HttpClient client, object body)
    {
        var id = (await client.StartSearchAsync(body)).GetProperty("id").GetString()!;
        var done = await client.WaitForStateAsync(id, "succeeded", "failed");
        Assert.True(done.GetProperty("state").GetString() == "succeeded", done.ToString());
        return id;
    }

    /// <summary>The kind of every trial the search stored itself (measured, not reused).</summary>
    private static async Task<List<string>> KindsAsync(HttpClient client, string id)
    {
        var page = await (await client.GetAsync($"/v1/searches/{id}/trials?limit=500")).JsonAsync();
        return page.GetProperty("items").EnumerateArray().Select(t => t.GetProperty("kind").GetString()!).ToList();
    }
}
