using System.Net;
using System.Text;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

/// <summary>Every way a search request can be wrong is refused before anything is queued, with a precise problem.</summary>
public sealed class SearchValidationTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    private readonly HttpClient client = factory.CreateAuthorizedClient();

    [Theory]
    [InlineData("""{"metric":"psnr","atLeast":30}""", "budget.metric", "Unknown metric 'psnr'")]
    [InlineData("""{"metric":"sqnr","atMost":30}""", "budget.atMost", "bounded from below")]
    [InlineData("""{"metric":"kl","atLeast":0.1}""", "budget.atLeast", "bounded from above")]
    [InlineData("""{"metric":"sqnr"}""", "budget.atLeast", "give atLeast")]
    [InlineData("""{"atLeast":30}""", "budget.metric", "needs a metric")]
    [InlineData("""{"metric":"sqnr","atLeast":-3}""", "budget.atLeast", "must lie in (0, 200]")]
    [InlineData("""{"metric":"top1","atLeast":1.5}""", "budget.atLeast", "must lie in (0, 1]")]
    [InlineData("""{"metric":"accuracy-drop","atMost":101}""", "budget.atMost", "percentage points")]
    [InlineData("""{"bytes":0}""", "budget.bytes", "positive")]
    [InlineData("""{"averageBits":1}""", "budget.averageBits", "between 2 and 32")]
    [InlineData("""{"bytes":1000,"averageBits":4}""", "budget", "not both")]
    [InlineData("""{"metric":"sqnr","atLeast":30,"bytes":1000}""", "budget", "not both")]
    public async Task BadBudgetIsAnInvalidRequestNamingTheField(string budget, string field, string message)
    {
        var problem = await PostAsync($$"""{"budget":{{budget}}}""", HttpStatusCode.BadRequest, "invalid-request");
        Assert.Contains(message, string.Join(" ", problem.GetProperty("errors").GetProperty(field).EnumerateArray().Select(e => e.GetString())), StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("\"bits\":[]", "bits", "at least one")]
    [InlineData("\"bits\":[4,9,1]", "bits", "Unsupported bit width(s) 9, 1")]
    [InlineData("\"bits\":[4,4]", "bits", "same width twice")]
    [InlineData("\"method\":\"annealing\"", "method", "knapsack, greedy")]
    [InlineData("\"scheme\":\"log\"", "scheme", "Unknown scheme")]
    [InlineData("\"granularity\":\"per-group\"", "granularity", "per-channel, per-tensor")]
    [InlineData("\"clip\":\"entropy\"", "clip", "min-max")]
    [InlineData("\"storage\":\"bits\"", "storage", "container, packed")]
    [InlineData("\"rounding\":[\"stochastic\"]", "rounding", "Unknown rounding 'stochastic'; use one or both of nearest, compensated")]
    [InlineData("\"rounding\":[]", "rounding", "at least one of nearest, compensated")]
    [InlineData("\"pairs\":65", "pairs", "0 (pair terms off) to 64; 65 is out of range")]
    [InlineData("\"pairs\":-1", "pairs", "0 (pair terms off) to 64; -1 is out of range")]
    [InlineData("\"pin\":{\"conv9\":4}", "pin.conv9", "no layer 'conv9'")]
    [InlineData("\"pin\":{\"fc\":12}", "pin.fc", "Bit width 12")]
    [InlineData("\"exclude\":[\"nope\"]", "exclude", "no layer 'nope'")]
    [InlineData("\"exclude\":[\"fc\"],\"pin\":{\"fc\":8}", "exclude", "both pinned and excluded")]
    [InlineData("\"exclude\":[\"conv1\",\"conv2\",\"fc\"]", "exclude", "nothing to search")]
    [InlineData("\"metricSpace\":\"log\"", "metricSpace", "Unknown metricSpace 'log'; use one of linear, logit")]
    [InlineData("\"outputs\":[]", "outputs", "at least one model output")]
    [InlineData("\"outputs\":[\"probability\"]", "outputs", "no output 'probability'; its outputs are: logits")]
    [InlineData("\"sampleAxes\":{\"state\":1}", "sampleAxes.state", "no input 'state'; its inputs are: image")]
    [InlineData("\"sampleAxes\":{\"image\":4}", "sampleAxes.image", "axes 0 to 3; got 4")]
    public async Task BadOptionIsAnInvalidRequestNamingTheField(string option, string field, string message)
    {
        var problem = await PostAsync($$"""{"budget":{"metric":"sqnr","atLeast":30},{{option}}}""", HttpStatusCode.BadRequest, "invalid-request");
        Assert.Contains(message, string.Join(" ", problem.GetProperty("errors").GetProperty(field).EnumerateArray().Select(e => e.GetString())), StringComparison.Ordinal);
    }

    [Fact]
    public async Task SeveralProblemsAreReportedTogether()
    {
        var problem = await PostAsync("""{"budget":{"metric":"sqnr","atMost":3},"bits":[],"method":"x"}""", HttpStatusCode.BadRequest, "invalid-request");
        var errors = problem.GetProperty("errors");
        Assert.True(errors.TryGetProperty("budget.atMost", out _));
        Assert.True(errors.TryGetProperty("bits", out _));
        Assert.True(errors.TryGetProperty("method", out _));
        Assert.StartsWith("The search request has 3 problems", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("{not json", "body")]
    [InlineData("""{"budget":{"metric":"sqnr","atLeast":30},"budjet":1}""", "budjet")]
    [InlineData("""{"budget":{"metric":"sqnr","atLeast":"high"}}""", "budget.atLeast")]
    public async Task UnreadableBodyIsAnInvalidRequest(string tail, string field)
    {
        var json = tail.StartsWith('{') && !tail.StartsWith("{not", StringComparison.Ordinal)
            ? tail.Insert(1, "\"modelId\":\"$M\",\"datasetId\":\"$D\",")
            : tail;
        var problem = await PostRawAsync(json, HttpStatusCode.BadRequest, "invalid-request");
        Assert.True(problem.GetProperty("errors").TryGetProperty(field, out _));
    }

    [Fact]
    public async Task MissingIdsAreInvalidAndUnknownIdsAreNotFound()
    {
        var noModel = await PostRawAsync("""{"datasetId":"x","budget":{"metric":"sqnr","atLeast":30}}""", HttpStatusCode.BadRequest, "invalid-request");
        Assert.True(noModel.GetProperty("errors").TryGetProperty("modelId", out _));
        var unknown = await PostRawAsync("""{"modelId":"mdl_x","datasetId":"$D","budget":{"metric":"sqnr","atLeast":30}}""", HttpStatusCode.NotFound, "not-found");
        Assert.Contains("mdl_x", unknown.GetProperty("detail").GetString(), StringComparison.Ordinal);
        await PostRawAsync("""{"modelId":"$M","datasetId":"dst_x","budget":{"metric":"sqnr","atLeast":30}}""", HttpStatusCode.NotFound, "not-found");
        var holdout = await PostRawAsync("""{"modelId":"$M","datasetId":"$D","holdoutDatasetId":"dst_x","budget":{"metric":"sqnr","atLeast":30}}""", HttpStatusCode.NotFound, "not-found");
        Assert.Contains("holdoutDatasetId", holdout.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task DatasetThatCannotFeedTheModelIsAMismatch()
    {
        var (modelId, _) = await client.UploadAsync("mismatch-model");
        var otherDataset = (await (await client.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset("mismatch", input: "tokens"))).JsonAsync()).GetProperty("id").GetString();
        var body = $$$"""{"modelId":"{{{modelId}}}","datasetId":"{{{otherDataset}}}","budget":{"metric":"sqnr","atLeast":30}}""";

        var problem = await SendAsync(body, HttpStatusCode.UnprocessableEntity, "dataset-mismatch");

        Assert.Contains("tokens", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task AccuracyBudgetNeedsLabels()
    {
        await PostAsync("""{"budget":{"metric":"accuracy-drop","atMost":0.5}}""", HttpStatusCode.UnprocessableEntity, "dataset-no-labels");
    }

    [Fact]
    public async Task ActivationsNeedOpset13()
    {
        var (modelId, datasetId) = await client.UploadAsync("opset11", FakeSearchEngine.Model("opset11", opset: 11), FakeSearchEngine.Dataset("opset11"));
        var body = $$"""{"modelId":"{{modelId}}","datasetId":"{{datasetId}}","budget":{"metric":"sqnr","atLeast":30},"activations":true}""";
        await SendAsync(body, HttpStatusCode.UnprocessableEntity, "activations-need-opset-13");
    }

    [Theory]
    [InlineData(9, "below the model's opset 11")]
    [InlineData(23, "beyond opset 22")]
    public async Task TargetOpsetOutsideTheRaisableRangeIsAnInvalidRequest(long target, string message)
    {
        var (modelId, datasetId) = await client.UploadAsync("opset11-target", FakeSearchEngine.Model("opset11-target", opset: 11), FakeSearchEngine.Dataset("opset11-target"));
        var body = $$"""{"modelId":"{{modelId}}","datasetId":"{{datasetId}}","budget":{"metric":"sqnr","atLeast":30},"targetOpset":{{target}}}""";

        var problem = await SendAsync(body, HttpStatusCode.BadRequest, "invalid-request");

        Assert.Contains(message, string.Join(" ", problem.GetProperty("errors").GetProperty("targetOpset").EnumerateArray().Select(e => e.GetString())), StringComparison.Ordinal);
    }

    [Fact]
    public async Task ActivationsOnAnOldModelAreAcceptedWithATargetOpsetOf13()
    {
        var (modelId, datasetId) = await client.UploadAsync("opset11-raised", FakeSearchEngine.Model("opset11-raised", opset: 11), FakeSearchEngine.Dataset("opset11-raised"));
        var body = $$"""{"modelId":"{{modelId}}","datasetId":"{{datasetId}}","budget":{"metric":"sqnr","atLeast":30},"activations":true,"targetOpset":13}""";

        var response = await client.PostAsync("/v1/searches", new StringContent(body, Encoding.UTF8, "application/json"));

        Assert.True(response.IsSuccessStatusCode, await response.Content.ReadAsStringAsync());
        var settings = (await response.JsonAsync()).GetProperty("settings");
        Assert.Equal(13, settings.GetProperty("targetOpset").GetInt64());
    }

    [Fact]
    public async Task EnumValuesAreAcceptedInAnyCaseAndEchoedInTheirWireSpelling()
    {
        var (modelId, datasetId) = await client.UploadAsync("any-case");
        var body = $$"""
            {"modelId":"{{modelId}}","datasetId":"{{datasetId}}","budget":{"metric":"SQNR","atLeast":30},
             "method":"Knapsack","scheme":"Symmetric","granularity":"PER-CHANNEL","clip":"Mse-Optimal","metricSpace":"Linear","storage":"Container"}
            """;

        var response = await client.PostAsync("/v1/searches", new StringContent(body, Encoding.UTF8, "application/json"));

        Assert.True(response.IsSuccessStatusCode, await response.Content.ReadAsStringAsync());
        var settings = (await response.JsonAsync()).GetProperty("settings");
        Assert.Equal("sqnr", settings.GetProperty("budget").GetProperty("metric").GetString());
        Assert.Equal("knapsack", settings.GetProperty("method").GetString());
        Assert.Equal("symmetric", settings.GetProperty("scheme").GetString());
        Assert.Equal("per-channel", settings.GetProperty("granularity").GetString());
        Assert.Equal("mse-optimal", settings.GetProperty("clip").GetString());
        Assert.Equal("linear", settings.GetProperty("metricSpace").GetString());
        Assert.Equal("container", settings.GetProperty("storage").GetString());
        Assert.False(settings.TryGetProperty("calibration", out _));
    }

    [Fact]
    public async Task RefusedRequestsQueueNothing()
    {
        var (modelId, datasetId) = await client.UploadAsync("nothing-queued");
        await SendAsync($$$"""{"modelId":"{{{modelId}}}","datasetId":"{{{datasetId}}}","budget":{"metric":"sqnr","atMost":30}}""", HttpStatusCode.BadRequest, "invalid-request");

        var listed = await (await client.GetAsync($"/v1/searches?modelId={modelId}")).JsonAsync();

        Assert.Equal(0, listed.GetArrayLength());
    }

    private async Task<System.Text.Json.JsonElement> PostAsync(string body, HttpStatusCode status, string code) =>
        await PostRawAsync(body.Insert(1, "\"modelId\":\"$M\",\"datasetId\":\"$D\","), status, code);

    private async Task<System.Text.Json.JsonElement> PostRawAsync(string body, HttpStatusCode status, string code)
    {
        var (modelId, datasetId) = await client.UploadAsync("validation");
        return await SendAsync(body.Replace("$M", modelId, StringComparison.Ordinal).Replace("$D", datasetId, StringComparison.Ordinal), status, code);
    }

    private async Task<System.Text.Json.JsonElement> SendAsync(string body, HttpStatusCode status, string code) =>
        await (await client.PostAsync("/v1/searches", new StringContent(body, Encoding.UTF8, "application/json"))).AssertProblemAsync(status, code);
}
