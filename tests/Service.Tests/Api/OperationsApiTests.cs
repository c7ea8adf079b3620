using System.Net;
using System.Net.Http.Json;
using System.Text.RegularExpressions;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

public sealed class OperationsApiTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Fact]
    public async Task HealthReportsStoreAndQueue()
    {
        var health = await (await factory.CreateClient().GetAsync("/healthz")).JsonAsync();

        Assert.Equal("ok", health.GetProperty("status").GetString());
        Assert.Equal("ok", health.GetProperty("store").GetString());
        Assert.Equal("ok", health.GetProperty("queue").GetString());
    }

    [Fact]
    public async Task MetricsCountSearchesByStateAndTrialsInAHistogram()
    {
        var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync("metrics");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 4, 8 } })).GetProperty("id").GetString()!;
        await client.WaitForStateAsync(id, "succeeded");

        var response = await factory.CreateClient().GetAsync("/metrics");
        var text = await response.Content.ReadAsStringAsync();

        Assert.Equal("text/plain", response.Content.Headers.ContentType?.MediaType);
        Assert.Contains("# TYPE bitbudget_searches gauge", text, StringComparison.Ordinal);
        Assert.Matches(new Regex("^bitbudget_searches\\{state=\"succeeded\"\\} 1$", RegexOptions.Multiline), text);
        Assert.Matches(new Regex("^bitbudget_searches\\{state=\"queued\"\\} 0$", RegexOptions.Multiline), text);
        // 1 reference + 3 layers x 2 widths + 1 validation; the double's durations are 2 + bits ms.
        Assert.Matches(new Regex("^bitbudget_trials_total 8$", RegexOptions.Multiline), text);
        Assert.Matches(new Regex("^bitbudget_trial_duration_seconds_bucket\\{le=\"0.01\"\\} 8$", RegexOptions.Multiline), text);
        Assert.Matches(new Regex("^bitbudget_trial_duration_seconds_bucket\\{le=\"\\+Inf\"\\} 8$", RegexOptions.Multiline), text);
        Assert.Matches(new Regex("^bitbudget_trial_duration_seconds_count 8$", RegexOptions.Multiline), text);
        // 2 + 2 (reference, validation) + 3 x (6 + 10) = 52 ms.
        Assert.Matches(new Regex("^bitbudget_trial_duration_seconds_sum 0.052$", RegexOptions.Multiline), text);
    }

    [Fact]
    public async Task OpenApiDocumentNamesEveryOperation()
    {
        var document = await (await factory.CreateClient().GetAsync("/openapi/v1.json")).JsonAsync();

        var operations = document.GetProperty("paths").EnumerateObject()
            .SelectMany(p => p.Value.EnumerateObject())
            .Select(o => o.Value.GetProperty("operationId").GetString())
            .ToHashSet();
        foreach (var name in new[] { "UploadModel", "ListModels", "GetModel", "UploadDataset", "GetDataset", "StartSearch", "ListSearches", "GetSearch", "CancelSearch", "GetSearchManifest", "GetSearchModel", "GetSearchSensitivity", "GetSearchFrontier", "GetSearchTrials", "Health", "Metrics" })
        {
            Assert.Contains(name, operations);
        }
    }

    [Fact]
    public async Task UnknownRouteIsANotFoundProblem()
    {
        await (await factory.CreateClient().GetAsync("/v2/things")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    [Fact]
    public async Task UploadWithTheWrongMediaTypeSaysWhichToUse()
    {
        var response = await factory.CreateAuthorizedClient().PostAsJsonAsync("/v1/models", new { hello = 1 });
        var problem = await response.AssertProblemAsync(HttpStatusCode.UnsupportedMediaType, "unsupported-media-type");
        Assert.Contains("application/octet-stream", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }
}
