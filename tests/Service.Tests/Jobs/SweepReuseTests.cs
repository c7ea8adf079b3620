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

        Assert.Equal(SweepTrials, (await MeasuredKindsAsync(client, first)).Count(k => k == "sensitivity"));
        var measuredBySecond = await MeasuredKindsAsync(client, second);
        Assert.DoesNotContain("sensitivity", measuredBySecond);
        Assert.Contains("validation", measuredBySecond);
        Assert.Equal(SweepTrials, (await MeasuredKindsAsync(client, otherScheme)).Count(k => k == "sensitivity"));

        // The second search's trial list holds every trial its result rests on (its manifest's count): the first's
        // sweep, each naming the first, and what it measured itself; the page's counts split the two.
        var page = await TrialsAsync(client, second);
        var manifest = await (await client.GetAsync($"/v1/searches/{second}/manifest")).JsonAsync();
        Assert.Equal(manifest.GetProperty("trials").GetInt32(), page.GetProperty("total").GetInt32());
        Assert.Equal(SweepTrials, page.GetProperty("reused").GetInt32());
        Assert.Equal(measuredBySecond.Count, page.GetProperty("measured").GetInt32());
        var reused = page.GetProperty("items").EnumerateArray().Where(t => t.GetProperty("reusedFrom").ValueKind == JsonValueKind.String).ToList();
        Assert.Equal(SweepTrials, reused.Count);
        Assert.All(reused, t => Assert.Equal((first, "sensitivity"), (t.GetProperty("reusedFrom").GetString(), t.GetProperty("kind").GetString())));

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

    private static async Task<JsonElement> TrialsAsync(HttpClient client, string id) =>
        await (await client.GetAsync($"/v1/searches/{id}/trials?limit=500")).JsonAsync();

    /// <summary>The kind of every trial the search measured itself (not reused from an earlier search).</summary>
    private static async Task<List<string>> MeasuredKindsAsync(HttpClient client, string id) =>
        (await TrialsAsync(client, id)).GetProperty("items").EnumerateArray()
            .Where(t => t.GetProperty("reusedFrom").ValueKind == JsonValueKind.Null)
            .Select(t => t.GetProperty("kind").GetString()!)
            .ToList();
}
