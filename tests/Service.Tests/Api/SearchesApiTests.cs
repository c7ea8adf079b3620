using System.Net;
using System.Net.Http.Json;
using System.Text;
using System.Text.Json;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

public sealed class SearchesApiTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    private readonly HttpClient client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task SearchRunsFromQueuedToSucceededAndItsArtifactsDownload()
    {
        var (modelId, datasetId) = await client.UploadAsync("lifecycle");

        var accepted = await client.PostAsJsonAsync("/v1/searches", new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } });

        Assert.Equal(HttpStatusCode.Accepted, accepted.StatusCode);
        var queued = await accepted.JsonAsync();
        var id = queued.GetProperty("id").GetString()!;
        Assert.Equal($"/v1/searches/{id}", accepted.Headers.Location?.ToString());
        Assert.Contains(queued.GetProperty("state").GetString(), new[] { "queued", "running", "succeeded" });
        // No bits given: the engine takes the widths the storage tells apart at the model's opset (the manifest lists them).
        Assert.Equal(JsonValueKind.Null, queued.GetProperty("settings").GetProperty("bits").ValueKind);
        Assert.Equal("container", queued.GetProperty("settings").GetProperty("storage").GetString());
        Assert.Equal("knapsack", queued.GetProperty("settings").GetProperty("method").GetString());

        var done = await client.WaitForStateAsync(id, "succeeded", "failed");
        Assert.Equal("succeeded", done.GetProperty("state").GetString());
        Assert.Equal("export", done.GetProperty("stage").GetString());
        Assert.NotEqual(JsonValueKind.Null, done.GetProperty("startedAt").ValueKind);
        Assert.NotEqual(JsonValueKind.Null, done.GetProperty("finishedAt").ValueKind);
        var summary = done.GetProperty("summary");
        Assert.True(summary.GetProperty("feasible").GetBoolean());
        // conv1: 6.02 b + 0 >= 20 first at 4 bits; conv2: 6.02 b + 0 at 4; fc: 6.02 b + 2 at 3 (the double's rule).
        Assert.Equal((864 * 4 / 8) + (18432 * 4 / 8) + (10240 * 3 / 8), summary.GetProperty("bytes").GetInt64());
        Assert.Equal(1 + (3 * 6) + 1, summary.GetProperty("trialCount").GetInt32());

        var manifest = await client.GetAsync($"/v1/searches/{id}/manifest");
        Assert.Equal(HttpStatusCode.OK, manifest.StatusCode);
        Assert.Equal("application/json", manifest.Content.Headers.ContentType?.MediaType);
        Assert.Equal("conv1=4,conv2=4,fc=3", (await manifest.JsonAsync()).GetProperty("assignment").GetString());

        var model = await client.GetAsync($"/v1/searches/{id}/model");
        Assert.Equal("application/octet-stream", model.Content.Headers.ContentType?.MediaType);
        Assert.EndsWith("quantized conv1=4,conv2=4,fc=3", Encoding.UTF8.GetString(await model.Content.ReadAsByteArrayAsync()), StringComparison.Ordinal);

        var csv = await client.GetAsync($"/v1/searches/{id}/sensitivity");
        Assert.Equal("text/csv", csv.Content.Headers.ContentType?.MediaType);
        Assert.Equal(1 + 18, (await csv.Content.ReadAsStringAsync()).Trim().Split('\n').Length);

        var frontier = await client.GetAsync($"/v1/searches/{id}/frontier");
        Assert.Equal(JsonValueKind.Array, (await frontier.JsonAsync()).ValueKind);
    }

    [Fact]
    public async Task RoundingIsAcceptedInAnyCaseAndEchoedNearestFirst()
    {
        var (modelId, datasetId) = await client.UploadAsync("rounding");

        var accepted = await client.PostAsJsonAsync("/v1/searches", new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 4, 8 }, rounding = new[] { "Compensated", "nearest" } });

        Assert.Equal(HttpStatusCode.Accepted, accepted.StatusCode);
        var id = (await accepted.JsonAsync()).GetProperty("id").GetString()!;
        var done = await client.WaitForStateAsync(id, "succeeded", "failed");
        Assert.Equal("succeeded", done.GetProperty("state").GetString());
        Assert.Equal(["nearest", "compensated"], done.GetProperty("settings").GetProperty("rounding").EnumerateArray().Select(r => r.GetString()));
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public async Task BiasCorrectionReachesTheEngineAndIsEchoed(bool on)
    {
        var tag = on ? "bias-on" : "bias-off";
        var (modelId, datasetId) = await client.UploadAsync(tag);

        var accepted = await client.PostAsJsonAsync("/v1/searches", new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 4, 8 }, biasCorrection = on });

        Assert.Equal(HttpStatusCode.Accepted, accepted.StatusCode);
        var id = (await accepted.JsonAsync()).GetProperty("id").GetString()!;
        var done = await client.WaitForStateAsync(id, "succeeded", "failed");
        Assert.Equal(on, done.GetProperty("settings").GetProperty("biasCorrection").GetBoolean());
        Assert.Equal(on, factory.Engine.Settings[tag].BiasCorrection);
    }

    [Fact]
    public async Task PairsAreEchoedInTheSettings()
    {
        var (modelId, datasetId) = await client.UploadAsync("pairs");

        var accepted = await client.PostAsJsonAsync("/v1/searches", new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 2, 4, 8 }, storage = "packed", pairs = 3 });

        Assert.Equal(HttpStatusCode.Accepted, accepted.StatusCode);
        var id = (await accepted.JsonAsync()).GetProperty("id").GetString()!;
        var done = await client.WaitForStateAsync(id, "succeeded", "failed");
        Assert.Equal("succeeded", done.GetProperty("state").GetString());
        Assert.Equal(3, done.GetProperty("settings").GetProperty("pairs").GetInt32());
    }

    [Fact]
    public async Task ManifestCarriesAnETagAndIfNoneMatchGivesNotModified()
    {
        var id = await RunToSuccessAsync("etag");
        var first = await client.GetAsync($"/v1/searches/{id}/manifest");
        var etag = first.Headers.ETag;
        Assert.NotNull(etag);
        var bytes = await first.Content.ReadAsByteArrayAsync();
        Assert.Equal($"\"{Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(bytes))}\"", etag.Tag);

        using var conditional = new HttpRequestMessage(HttpMethod.Get, $"/v1/searches/{id}/manifest");
        conditional.Headers.IfNoneMatch.Add(etag);
        var second = await client.SendAsync(conditional);
        Assert.Equal(HttpStatusCode.NotModified, second.StatusCode);
        Assert.Empty(await second.Content.ReadAsByteArrayAsync());

        using var stale = new HttpRequestMessage(HttpMethod.Get, $"/v1/searches/{id}/manifest");
        stale.Headers.IfNoneMatch.Add(new System.Net.Http.Headers.EntityTagHeaderValue("\"0000\""));
        Assert.Equal(HttpStatusCode.OK, (await client.SendAsync(stale)).StatusCode);
    }

    [Fact]
    public async Task ArtifactsAreConflictWhileTheSearchRunsAndTrialsShowProgress()
    {
        var (modelId, datasetId) = await client.UploadAsync("not-ready");
        var hold = factory.Engine.HoldRun("not-ready");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));

        foreach (var artifact in new[] { "manifest", "model", "sensitivity", "frontier" })
        {
            var problem = await (await client.GetAsync($"/v1/searches/{id}/{artifact}")).AssertProblemAsync(HttpStatusCode.Conflict, "search-not-ready");
            Assert.Contains("running", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
        }

        var running = await client.WaitForStateAsync(id, "running");
        Assert.Equal("sweep", running.GetProperty("stage").GetString());
        Assert.Equal(18, running.GetProperty("progress").GetProperty("total").GetInt32());
        var trials = await (await client.GetAsync($"/v1/searches/{id}/trials")).JsonAsync();
        Assert.Equal(2, trials.GetProperty("total").GetInt64());

        hold.Release();
        await client.WaitForStateAsync(id, "succeeded");
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync($"/v1/searches/{id}/manifest")).StatusCode);
    }

    [Fact]
    public async Task CancelStopsARunningSearchAndKeepsItsTrials()
    {
        var (modelId, datasetId) = await client.UploadAsync("cancel");
        var hold = factory.Engine.HoldRun("cancel");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));

        var canceled = await client.DeleteAsync($"/v1/searches/{id}");

        Assert.Equal(HttpStatusCode.OK, canceled.StatusCode);
        Assert.Equal("canceled", (await canceled.JsonAsync()).GetProperty("state").GetString());
        // The engine was blocked on its gate, which nobody opened: only the cancellation token can free it.
        await hold.Canceled.Task.WaitAsync(TimeSpan.FromSeconds(30));
        Assert.False(hold.Gate.IsSet);
        var after = await (await client.GetAsync($"/v1/searches/{id}")).JsonAsync();
        Assert.Equal("canceled", after.GetProperty("state").GetString());
        Assert.Equal(JsonValueKind.Null, after.GetProperty("summary").ValueKind);
        var trials = await (await client.GetAsync($"/v1/searches/{id}/trials")).JsonAsync();
        Assert.Equal(2, trials.GetProperty("total").GetInt64());
        await (await client.GetAsync($"/v1/searches/{id}/manifest")).AssertProblemAsync(HttpStatusCode.Conflict, "search-not-ready");
        await (await client.DeleteAsync($"/v1/searches/{id}")).AssertProblemAsync(HttpStatusCode.Conflict, "search-finished");
    }

    [Fact]
    public async Task IdempotencyKeyReturnsTheSameSearchForARetriedPost()
    {
        var (modelId, datasetId) = await client.UploadAsync("idempotent");
        var body = new { modelId, datasetId, budget = new { metric = "top1", atLeast = 0.99 } };

        var first = await client.StartSearchAsync(body, "retry-123");
        var second = await client.StartSearchAsync(body, "retry-123");
        var other = await client.StartSearchAsync(body, "retry-456");

        Assert.Equal(first.GetProperty("id").GetString(), second.GetProperty("id").GetString());
        Assert.NotEqual(first.GetProperty("id").GetString(), other.GetProperty("id").GetString());
        var listed = await (await client.GetAsync($"/v1/searches?modelId={modelId}")).JsonAsync();
        Assert.Equal(2, listed.GetArrayLength());

        var changed = await client.SendAsync(new HttpRequestMessage(HttpMethod.Post, "/v1/searches")
        {
            Content = JsonContent.Create(new { modelId, datasetId, budget = new { metric = "top1", atLeast = 0.95 } }),
            Headers = { { "Idempotency-Key", "retry-123" } },
        });
        await changed.AssertProblemAsync(HttpStatusCode.UnprocessableEntity, "idempotency-key-reused");
        await client.WaitForStateAsync(first.GetProperty("id").GetString()!, "succeeded");
        await client.WaitForStateAsync(other.GetProperty("id").GetString()!, "succeeded");
    }

    [Fact]
    public async Task SearchesOfAModelAreListedNewestFirst()
    {
        var (modelId, datasetId) = await client.UploadAsync("listing");
        var older = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 10 } })).GetProperty("id").GetString();
        var newer = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 11 } })).GetProperty("id").GetString();

        var listed = await (await client.GetAsync($"/v1/searches?modelId={modelId}")).JsonAsync();

        Assert.Equal([newer, older], listed.EnumerateArray().Select(s => s.GetProperty("id").GetString()));
        await client.WaitForStateAsync(newer!, "succeeded");
        await client.WaitForStateAsync(older!, "succeeded");
    }

    [Fact]
    public async Task SettingsReachTheEngineAsTyped()
    {
        var (modelId, datasetId) = await client.UploadAsync("settings");
        var id = (await client.StartSearchAsync(new
        {
            modelId,
            datasetId,
            budget = new { averageBits = 4.5 },
            bits = new[] { 8, 4 },
            method = "greedy",
            scheme = "asymmetric",
            granularity = "per-tensor",
            clip = "mse-optimal",
            pin = new Dictionary<string, int> { ["fc"] = 8 },
            exclude = new[] { "conv1" },
            targetOpset = 21,
        })).GetProperty("id").GetString()!;
        await client.WaitForStateAsync(id, "succeeded");

        var settings = factory.Engine.Settings["settings"];
        Assert.Equal(21, settings.TargetOpset);
        Assert.Equal(new SizeBudget(null, 4.5, BudgetMetric.Sqnr), settings.Budget);
        Assert.Equal([4, 8], settings.Bits);
        Assert.Equal(SearchMethod.Greedy, settings.Method);
        Assert.Equal(Bitbudget.Search.Quantization.QuantizationScheme.Asymmetric, settings.Scheme);
        Assert.Equal(Bitbudget.Search.Quantization.Granularity.PerTensor, settings.Granularity);
        Assert.Equal(Bitbudget.Search.Quantization.ClipMethod.MseOptimal, settings.Clip);
        Assert.Equal(8, settings.Pins!["fc"]);
        Assert.Equal(["conv1"], settings.Excluded!);
    }

    [Fact]
    public async Task EngineRefusalEndsTheSearchFailedWithoutRetries()
    {
        var model = FakeSearchEngine.Model("refused", options: "fail model-invalid");
        var (modelId, datasetId) = await client.UploadAsync("refused", model);
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;

        var failed = await client.WaitForStateAsync(id, "failed", "succeeded");

        Assert.Equal("failed", failed.GetProperty("state").GetString());
        Assert.Equal("model-invalid", failed.GetProperty("error").GetProperty("code").GetString());
        Assert.Contains("8 bits everywhere", failed.GetProperty("error").GetProperty("message").GetString(), StringComparison.Ordinal);
        Assert.Equal(1, factory.Engine.Runs["refused"]);
        var problem = await (await client.GetAsync($"/v1/searches/{id}/model")).AssertProblemAsync(HttpStatusCode.Conflict, "search-not-ready");
        Assert.Contains("model-invalid", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task InfeasibleSearchSucceedsWithoutAQuantizedModel()
    {
        var (modelId, datasetId) = await client.UploadAsync("infeasible");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 150 } })).GetProperty("id").GetString()!;

        var done = await client.WaitForStateAsync(id, "succeeded");

        Assert.False(done.GetProperty("summary").GetProperty("feasible").GetBoolean());
        await (await client.GetAsync($"/v1/searches/{id}/model")).AssertProblemAsync(HttpStatusCode.Conflict, "budget-infeasible");
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync($"/v1/searches/{id}/manifest")).StatusCode);
    }

    [Fact]
    public async Task TrialsArePagedInTheOrderMeasured()
    {
        var id = await RunToSuccessAsync("paging");

        var page = await (await client.GetAsync($"/v1/searches/{id}/trials?offset=1&limit=5")).JsonAsync();

        Assert.Equal(20, page.GetProperty("total").GetInt64());
        var items = page.GetProperty("items").EnumerateArray().ToList();
        Assert.Equal(5, items.Count);
        Assert.Equal("sensitivity/conv1/2/Symmetric", items[0].GetProperty("key").GetString());
        Assert.Equal("conv1", items[0].GetProperty("layer").GetString());
        Assert.Equal(2, items[0].GetProperty("bits").GetInt32());
        Assert.Equal(12.04, items[0].GetProperty("metrics").GetProperty("sqnrDb").GetDouble(), 6);
        var reference = await (await client.GetAsync($"/v1/searches/{id}/trials?limit=1")).JsonAsync();
        Assert.Equal("Infinity", reference.GetProperty("items")[0].GetProperty("metrics").GetProperty("sqnrDb").GetString());
        await (await client.GetAsync($"/v1/searches/{id}/trials?limit=0")).AssertProblemAsync(HttpStatusCode.BadRequest, "invalid-request");
    }

    [Fact]
    public async Task UnknownSearchIsNotFoundOnEveryRoute()
    {
        foreach (var path in new[] { "", "/manifest", "/model", "/sensitivity", "/frontier", "/trials" })
        {
            await (await client.GetAsync($"/v1/searches/srch_nope{path}")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
        }

        await (await client.DeleteAsync("/v1/searches/srch_nope")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    private async Task<string> RunToSuccessAsync(string tag)
    {
        var (modelId, datasetId) = await client.UploadAsync(tag);
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        await client.WaitForStateAsync(id, "succeeded");
        return id;
    }
}
