using System.Net;
using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using System.Text.RegularExpressions;
using Bitbudget.Service.Tests.Support;
using Json.Schema;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// The served OpenAPI document is a contract a generated client can rely on. Outside check: JsonSchema.Net 8.0.5
/// evaluates README's request example and responses recorded from the running service against the schemas the
/// document itself gives (OpenAPI 3.1 schemas are JSON Schema 2020-12); nothing here is written by hand.
/// </summary>
public sealed partial class OpenApiContractTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Fact]
    public async Task TheDocumentDeclaresTheBearerSchemeAndEveryKeyedRouteAnswers401AsAProblem()
    {
        var document = await DocumentAsync();

        Assert.Equal("http", (string?)document["components"]!["securitySchemes"]!["bearer"]!["type"]);
        Assert.Equal("bearer", (string?)document["components"]!["securitySchemes"]!["bearer"]!["scheme"]);
        foreach (var (path, item) in document["paths"]!.AsObject())
        {
            foreach (var (method, operation) in item!.AsObject())
            {
                var open = path is "/healthz" or "/metrics";
                Assert.Equal(!open, operation!["security"] is JsonArray { Count: > 0 });
                if (!open)
                {
                    Assert.NotNull(operation["responses"]!["401"]!["content"]!["application/problem+json"]);
                }
            }
        }
    }

    [Fact]
    public async Task ReadmesSearchRequestAndABytesOnlyBudgetMatchTheRequestSchemaAndBrokenOnesDoNot()
    {
        var document = await DocumentAsync();
        var request = RequestSchema(document, "/v1/searches");

        // README's walk-through, step 2, with the shell variables filled in.
        var readme = File.ReadAllText(Path.Combine(RepositoryRoot(), "README.md"));
        var body = ReadmeSearchBody().Match(readme);
        Assert.True(body.Success, "README no longer has the curl search request this test reads.");
        var example = JsonNode.Parse(body.Groups[1].Value.Replace("\\\"", "\"", StringComparison.Ordinal).Replace("$MODEL", "mdl_1", StringComparison.Ordinal).Replace("$DATA", "dst_1", StringComparison.Ordinal));
        AssertValid(document, request, example);

        // A size budget alone needs no metric (the service accepts it).
        AssertValid(document, request, JsonNode.Parse("""{"modelId":"mdl_1","datasetId":"dst_1","budget":{"bytes":12000},"method":"greedy"}"""));

        // Numbers are numbers and choices are the listed ones.
        Assert.False(Evaluate(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"metric":"sqnr","atLeast":"thirty"}}""")).IsValid);
        Assert.False(Evaluate(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"bytes":1000},"method":"annealing"}""")).IsValid);

        // pairs: 0 (off) to 64, as the service checks it.
        AssertValid(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"metric":"sqnr","atLeast":30},"pairs":16}"""));
        Assert.False(Evaluate(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"metric":"sqnr","atLeast":30},"pairs":65}""")).IsValid);
        Assert.False(Evaluate(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"metric":"sqnr","atLeast":30},"pairs":-1}""")).IsValid);

        // biasCorrection is a boolean, as the service reads it.
        AssertValid(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"bytes":1000},"rounding":["compensated"],"biasCorrection":true}"""));
        Assert.False(Evaluate(document, request, JsonNode.Parse("""{"modelId":"m","datasetId":"d","budget":{"bytes":1000},"biasCorrection":"yes"}""")).IsValid);
    }

    [Fact]
    public async Task RecordedResponsesOfARealSearchMatchTheDocument()
    {
        var document = await DocumentAsync();
        var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync("contract");
        var started = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 4, 8 } });
        var id = started.GetProperty("id").GetString()!;
        var search = await client.WaitForStateAsync(id, "succeeded");

        AssertValid(document, ResponseSchema(document, "/v1/searches", "post", "202", "201", "200"), JsonNode.Parse(started.GetRawText()));
        AssertValid(document, ResponseSchema(document, "/v1/searches/{id}", "get", "200"), JsonNode.Parse(search.GetRawText()));
        AssertValid(document, ResponseSchema(document, "/v1/searches", "get", "200"), JsonNode.Parse(await client.GetStringAsync("/v1/searches")));
        AssertValid(document, ResponseSchema(document, "/v1/searches/{id}/trials", "get", "200"), JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{id}/trials")));

        // A second search with only another budget reuses the first's sweep: its trial page (reused trials naming the
        // first search) matches the document too, and the document says what the counts and reusedFrom mean.
        var again = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 15 }, bits = new[] { 4, 8 } })).GetProperty("id").GetString()!;
        await client.WaitForStateAsync(again, "succeeded");
        var reusing = JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{again}/trials"))!;
        Assert.True(reusing["reused"]!.GetValue<long>() > 0, reusing.ToJsonString());
        Assert.Contains(reusing["items"]!.AsArray(), t => t!["reusedFrom"]?.GetValue<string>() == id);
        AssertValid(document, ResponseSchema(document, "/v1/searches/{id}/trials", "get", "200"), reusing);
        var schemas = document["components"]!["schemas"]!;
        Assert.Contains("manifest's trials", schemas["TrialPageResponse"]!["properties"]!["total"]!["description"]!.GetValue<string>(), StringComparison.Ordinal);
        Assert.Contains("earlier search that measured", schemas["TrialRecord"]!["properties"]!["reusedFrom"]!["description"]!.GetValue<string>(), StringComparison.Ordinal);
        AssertValid(document, ResponseSchema(document, "/v1/models/{id}", "get", "200"), JsonNode.Parse(await client.GetStringAsync($"/v1/models/{modelId}")));

        // A problem, as served, matches the problem schema the document gives for it.
        var missing = await client.GetAsync("/v1/searches/srch_missing");
        Assert.Equal(HttpStatusCode.NotFound, missing.StatusCode);
        var problem = document["paths"]!["/v1/searches/{id}"]!["get"]!["responses"]!["404"]!["content"]!["application/problem+json"]!["schema"]!;
        AssertValid(document, problem, JsonNode.Parse(await missing.Content.ReadAsStringAsync()));
    }

    private async Task<JsonObject> DocumentAsync() =>
        JsonNode.Parse(await factory.CreateClient().GetStringAsync("/openapi/v1.json"))!.AsObject();

    private static JsonNode RequestSchema(JsonObject document, string path) =>
        document["paths"]![path]!["post"]!["requestBody"]!["content"]!["application/json"]!["schema"]!;

    private static JsonNode ResponseSchema(JsonObject document, string path, string method, params string[] statuses)
    {
        var responses = document["paths"]![path]![method]!["responses"]!.AsObject();
        var status = statuses.First(responses.ContainsKey);
        return responses[status]!["content"]!["application/json"]!["schema"]!;
    }

    /// <summary>The schema at hand as a JSON Schema 2020-12 document whose $defs are the OpenAPI document's components.</summary>
    private static EvaluationResults Evaluate(JsonObject document, JsonNode schema, JsonNode? instance, OutputFormat format = OutputFormat.List)
    {
        var wrapper = new JsonObject
        {
            ["$schema"] = "https://json-schema.org/draft/2020-12/schema",
            ["$id"] = $"https://bitbudget.invalid/openapi/{Guid.NewGuid():N}",
            ["$defs"] = document["components"]!["schemas"]!.DeepClone(),
            ["allOf"] = new JsonArray(schema.DeepClone()),
        };
        // OpenAPI's formats (int32, int64, float, double) are data-type annotations, not JSON Schema format assertions.
        DropFormats(wrapper);
        var text = wrapper.ToJsonString().Replace("#/components/schemas/", "#/$defs/", StringComparison.Ordinal);
        using var parsed = JsonDocument.Parse(instance?.ToJsonString() ?? "null");
        return JsonSchema.FromText(text).Evaluate(parsed.RootElement, new EvaluationOptions { OutputFormat = format });
    }

    private static void DropFormats(JsonNode? node)
    {
        switch (node)
        {
            case JsonObject o:
                if (o["format"] is JsonValue format && format.TryGetValue<string>(out var name) && name is "int32" or "int64" or "float" or "double")
                {
                    o.Remove("format");
                }

                foreach (var (_, child) in o.ToList())
                {
                    DropFormats(child);
                }

                break;
            case JsonArray a:
                foreach (var child in a)
                {
                    DropFormats(child);
                }

                break;
        }
    }

    private static void AssertValid(JsonObject document, JsonNode schema, JsonNode? instance)
    {
        var results = Evaluate(document, schema, instance);
        var errors = new StringBuilder();
        foreach (var detail in results.Details ?? [])
        {
            foreach (var (keyword, message) in detail.Errors ?? new Dictionary<string, string>())
            {
                errors.Append(detail.InstanceLocation).Append(' ').Append(keyword).Append(": ").AppendLine(message);
            }
        }

        Assert.True(results.IsValid, $"{instance?.ToJsonString()}\ndoes not match the document:\n{errors}\n{JsonSerializer.Serialize(Evaluate(document, schema, instance, OutputFormat.Hierarchical))}");
    }

    private static string RepositoryRoot()
    {
        for (var folder = new DirectoryInfo(AppContext.BaseDirectory); folder is not null; folder = folder.Parent)
        {
            if (File.Exists(Path.Combine(folder.FullName, "Search.sln")))
            {
                return folder.FullName;
            }
        }

        throw new InvalidOperationException("The repository root (Search.sln) is not above the test binaries.");
    }

    [GeneratedRegex("""/v1/searches" -d "(\{.*?\})" \| jq""", RegexOptions.Singleline)]
    private static partial Regex ReadmeSearchBody();
}
