using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

/// <summary>A model name groups its versions (each retrain is new bytes, so a new id); searches and compare follow the name.</summary>
public sealed class LineageApiTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    private readonly HttpClient client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task ModelsOfOneNameListAsVersionsNewestFirst()
    {
        var first = await UploadAsync("lineage-models.onnx", "lineage-models-v1");
        await UploadAsync("unrelated-models.onnx", "lineage-unrelated");
        var second = await UploadAsync("lineage-models.onnx", "lineage-models-v2");

        var listed = await (await client.GetAsync("/v1/models?name=lineage-models.onnx")).JsonAsync();

        Assert.Equal([second, first], listed.EnumerateArray().Select(m => m.GetProperty("id").GetString()));
        Assert.Equal([2, 1], listed.EnumerateArray().Select(m => m.GetProperty("version").GetInt32()));
        Assert.Equal(1, (await (await client.GetAsync($"/v1/models/{first}")).JsonAsync()).GetProperty("version").GetInt32());
        Assert.Empty((await (await client.GetAsync("/v1/models?name=no-such-model.onnx")).JsonAsync()).EnumerateArray());
    }

    [Fact]
    public async Task SearchesOfEveryVersionOfANameListNewestFirstAndNoOthers()
    {
        var first = await UploadAsync("lineage-searches.onnx", "lineage-searches-v1");
        var other = await UploadAsync("other-searches.onnx", "lineage-searches-other");
        var second = await UploadAsync("lineage-searches.onnx", "lineage-searches-v2");
        var dataset = await DatasetAsync("lineage-searches");
        var a = await StartAsync(first, dataset);
        await StartAsync(other, dataset);
        var b = await StartAsync(second, dataset);

        var listed = await (await client.GetAsync("/v1/searches?name=lineage-searches.onnx")).JsonAsync();

        Assert.Equal([b, a], listed.EnumerateArray().Select(s => s.GetProperty("id").GetString()));
        var one = await (await client.GetAsync($"/v1/searches?name=lineage-searches.onnx&modelId={first}")).JsonAsync();
        Assert.Equal([a], one.EnumerateArray().Select(s => s.GetProperty("id").GetString()));
    }

    [Fact]
    public async Task CompareWithAnUnknownSearchIsNotFound()
    {
        var model = await UploadAsync("lineage-404.onnx", "lineage-404");
        var id = await StartAsync(model, await DatasetAsync("lineage-404"));
        await client.WaitForStateAsync(id, "succeeded", "failed");

        var problem = await (await client.GetAsync($"/v1/searches/{id}/compare/srch_missing")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
        Assert.Contains("srch_missing", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
        await (await client.GetAsync($"/v1/searches/srch_missing/compare/{id}")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    [Fact]
    public async Task CompareWithASearchThatDidNotSucceedIsAConflictThatSaysWhy()
    {
        var dataset = await DatasetAsync("lineage-409");
        var good = await StartAsync(await UploadAsync("lineage-409.onnx", "lineage-409-v1"), dataset);
        var failing = FakeSearchEngine.Model("lineage-409-v2", options: "fail model-unsupported");
        var bad = await StartAsync(await UploadAsync("lineage-409.onnx", "lineage-409-v2", failing), dataset);
        await client.WaitForStateAsync(good, "succeeded");
        await client.WaitForStateAsync(bad, "failed");

        var problem = await (await client.GetAsync($"/v1/searches/{good}/compare/{bad}")).AssertProblemAsync(HttpStatusCode.Conflict, "search-not-ready");
        Assert.Contains("failed", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
        Assert.Contains("Only succeeded searches can be compared", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    private async Task<string> UploadAsync(string name, string tag, byte[]? bytes = null)
    {
        var response = await client.PostBytesAsync($"/v1/models?name={name}", bytes ?? FakeSearchEngine.Model(tag));
        Assert.True(response.IsSuccessStatusCode, await response.Content.ReadAsStringAsync());
        return (await response.JsonAsync()).GetProperty("id").GetString()!;
    }

    private async Task<string> DatasetAsync(string tag) =>
        (await (await client.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset(tag))).JsonAsync()).GetProperty("id").GetString()!;

    private async Task<string> StartAsync(string modelId, string datasetId) =>
        (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
}
