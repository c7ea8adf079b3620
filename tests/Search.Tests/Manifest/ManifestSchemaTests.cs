using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Json.Schema;

namespace Bitbudget.Search.Tests.Manifest;

/// <summary>
/// docs/manifest.schema.json against what real searches write. Outside check: JsonSchema.Net 8.0.5
/// (a JSON Schema draft 2020-12 validator the project did not write) judges every manifest, so the
/// schema and <see cref="ManifestJson"/> cannot drift apart unnoticed.
/// </summary>
public sealed class ManifestSchemaTests
{
    private static readonly Lazy<JsonSchema> Schema = new(() =>
        JsonSchema.FromText(File.ReadAllText(Path.Combine(AppContext.BaseDirectory, "Schemas", "manifest.schema.json"))));

    // One search per budget for the whole class: each takes a fraction of a second on the small MLP.
    private static readonly Lazy<SearchResult> ErrorBudgetResult = new(() => Search(new ErrorBudget(BudgetMetric.Sqnr, 25)));

    [Fact]
    public void ErrorBudgetManifestMatchesTheSchema()
    {
        var result = ErrorBudgetResult.Value;
        Assert.True(result.Feasible, result.Message);
        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.Equal("error", (string?)manifest["budget"]!["kind"]);
        Assert.Equal(25.0, (double)manifest["budget"]!["atLeast"]!);
        Assert.NotNull(manifest["totals"]);
        Assert.Equal(3, manifest["layers"]!.AsArray().Count);
    }

    [Fact]
    public void ActivationSearchManifestMatchesTheSchemaWithActivationParameters()
    {
        var model = SmallModels.Mlp(opset: 13);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), [2, 4, 8], QuantizeActivations: true);
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);

        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.True((bool)manifest["settings"]!["activations"]!);
        Assert.All(manifest["layers"]!.AsArray(), layer => Assert.NotEmpty(layer!["activations"]!.AsArray()));
    }

    [Fact]
    public void SizeBudgetManifestMatchesTheSchema()
    {
        // Packed counting; average bits include scales and the nodes that dequantize, about 3 bits per weight on this tiny model.
        var result = Search(new SizeBudget(null, 8), StorageRule.Packed);
        Assert.True(result.Feasible, result.Message);
        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.Equal("size", (string?)manifest["budget"]!["kind"]);
        Assert.Equal(8, (double)manifest["budget"]!["averageBits"]!);
        Assert.True((double)manifest["totals"]!["averageBits"]! <= 8);
        Assert.Equal("packed", (string?)manifest["totals"]!["storage"]);
        Assert.Equal("packed", (string?)manifest["settings"]!["storage"]);
    }

    [Fact]
    public void InfeasibleManifestMatchesTheSchemaWithNullTotalsAndNoExport()
    {
        // 150 dB is beyond what 8-bit weights can give (about 6 dB per bit, common practice), so no assignment exists.
        var result = Search(new ErrorBudget(BudgetMetric.Sqnr, 150));
        Assert.False(result.Feasible);
        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.Null(manifest["totals"]);
        Assert.Null(manifest["export"]);
        Assert.All(manifest["layers"]!.AsArray(), layer => Assert.Null(layer!["bits"]));
        Assert.False((bool)manifest["outcome"]!["feasible"]!);
    }

    [Fact]
    public void OtherSettingsSpellingsMatchTheSchema()
    {
        // Greedy, asymmetric, per-tensor, MSE-optimal clip, a pin, an excluded layer and an upper-bound budget (KL).
        var model = SmallModels.Mlp();
        var settings = new SearchSettings(
            new ErrorBudget(BudgetMetric.KlDivergence, 0.05),
            [2, 4, 8],
            SearchMethod.Greedy,
            QuantizationScheme.Asymmetric,
            Granularity.PerTensor,
            ClipMethod.MseOptimal,
            Pins: new Dictionary<string, int> { ["fc1"] = 8 },
            Excluded: ["fc3"]);
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);
        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.Equal("mse-optimal", (string?)manifest["settings"]!["clip"]);
        Assert.Equal("per-tensor", (string?)manifest["settings"]!["granularity"]);
        Assert.Equal(0.05, (double)manifest["budget"]!["atMost"]!);
        Assert.Equal(8, (int)manifest["settings"]!["pin"]!["fc1"]!);
    }

    [Fact]
    public void KeepFloat32CandidateWritesAnInfinitePredictionAsTheStringInfinity()
    {
        // With 32 (keep FP32) among the candidates the frontier holds a zero-error point, whose
        // predicted SQNR is infinite; JSON has no infinity, so it comes out as "Infinity" (the API's
        // and the store's form too), never as null, which means absent, and never as a crash.
        var model = SmallModels.Mlp();
        var result = SearchRunner.Run(
            model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 200), [8, 32]), new InMemoryTrialStore(), null, CancellationToken.None);
        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.True(result.Feasible, result.Message);
        Assert.All(manifest["layers"]!.AsArray(), layer => Assert.Equal(32, (int)layer!["bits"]!));
        Assert.Equal("Infinity", (string?)manifest["totals"]!["predicted"]);
        Assert.Equal("Infinity", (string?)manifest["totals"]!["metrics"]!["sqnrDb"]);
        Assert.Equal("Infinity", (string?)manifest["reference"]!["sqnrDb"]);
        var frontier = JsonNode.Parse(result.FrontierJson)!;
        Assert.Contains(frontier["points"]!.AsArray(), p => p!["predicted"] is JsonValue v && v.TryGetValue<string>(out var text) && text == "Infinity" && (double)p["additiveError"]! == 0);
        Assert.True(double.IsPositiveInfinity(ManifestJson.Deserialize(result.ManifestJson).Totals!.Metrics.SqnrDb!.Value), "the manifest reads back as written");
    }

    [Fact]
    public void RaisedModelManifestRecordsBothOpsetsAndTheCheckInOrt()
    {
        var model = OnnxModel.Load(SmallModels.ClippedMlpBytes(opset: 9), "mlp", targetOpset: 13);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), [4, 8], TargetOpset: 13);
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);

        var manifest = Parse(result.ManifestJson);
        AssertValid(manifest);
        Assert.Equal(13, (long)manifest["model"]!["opset"]!);
        Assert.Equal(9, (long)manifest["model"]!["originalOpset"]!);
        var raise = manifest["model"]!["opsetRaise"]!;
        Assert.Equal((9L, 13L), ((long)raise["from"]!, (long)raise["to"]!));
        // Clip's attributes became inputs; Softmax(axis 1) of the rank-2 graph output is the single-axis form, written as axis -1.
        Assert.Equal(2, raise["rewritten"]!.AsArray().Count);
        Assert.Contains(raise["rewritten"]!.AsArray(), line => ((string)line!).Contains("kept as axis -1", StringComparison.Ordinal));
        Assert.True((bool)raise["bitExact"]!);
        Assert.Equal(0.0, (double)raise["relativeDifference"]!);
        Assert.Equal(13, (long)manifest["export"]!["opset"]!);
    }

    [Fact]
    public void UnraisedModelManifestHasEqualOpsetsAndNoRaise()
    {
        var manifest = Parse(ErrorBudgetResult.Value.ManifestJson);

        Assert.Equal((long)manifest["model"]!["opset"]!, (long)manifest["model"]!["originalOpset"]!);
        Assert.Null(manifest["model"]!["opsetRaise"]);
    }

    [Theory]
    [InlineData("model.originalOpset")]
    [InlineData("model.opsetRaise")]
    [InlineData("formatVersion")]
    [InlineData("createdAt")]
    [InlineData("totals")]
    [InlineData("export")]
    [InlineData("settings.clip")]
    [InlineData("budget.atMost")]
    [InlineData("reference.sqnrDb")]
    [InlineData("totals.metrics.accuracy")]
    [InlineData("layers.0.bits")]
    [InlineData("layers.2.sensitivity.1.additiveError")]
    [InlineData("layers.1.coverage")]
    [InlineData("layers.1.coverage.samplesChanged")]
    [InlineData("warnings")]
    [InlineData("skipped")]
    public void ManifestWithAFieldRemovedFailsTheSchema(string path)
    {
        var manifest = Parse(ErrorBudgetResult.Value.ManifestJson);
        var (parent, key) = Locate(manifest, path);
        Assert.True(parent.AsObject().Remove(key), $"'{path}' was not in the manifest.");
        AssertInvalid(manifest);
    }

    [Theory]
    [InlineData("settings.granularity", "PerChannel")]
    [InlineData("settings.granularity", "per_channel")]
    [InlineData("settings.clip", "MseOptimal")]
    [InlineData("settings.method", "exact")]
    [InlineData("layers.0.scheme", "Symmetric")]
    [InlineData("layers.1.clip", "minmax")]
    [InlineData("budget.metric", "Sqnr")]
    [InlineData("export.format", "QDQ")]
    [InlineData("layers.0.op", "Linear")]
    [InlineData("layers.0.coverage.status", "NotExercised")]
    [InlineData("layers.0.coverage.status", "unexercised")]
    public void ManifestWithAWrongEnumSpellingFailsTheSchema(string path, string value)
    {
        var manifest = Parse(ErrorBudgetResult.Value.ManifestJson);
        var (parent, key) = Locate(manifest, path);
        parent[key] = value;
        AssertInvalid(manifest);
    }

    [Fact]
    public void ManifestWithAnotherFormatVersionOrAnUnknownFieldFailsTheSchema()
    {
        var newer = Parse(ErrorBudgetResult.Value.ManifestJson);
        newer["formatVersion"] = AssignmentManifest.CurrentFormatVersion + 1;
        AssertInvalid(newer);

        var extra = Parse(ErrorBudgetResult.Value.ManifestJson);
        extra["layers"]![0]!.AsObject().Add("bitWidth", 4);
        AssertInvalid(extra);

        var wrongType = Parse(ErrorBudgetResult.Value.ManifestJson);
        wrongType["layers"]![0]!["bits"] = "4";
        AssertInvalid(wrongType);
    }

    [Fact]
    public void SchemaEnumsAreExactlyTheWireSpellingsOfTheEngineEnums()
    {
        using var schema = JsonDocument.Parse(File.ReadAllText(Path.Combine(AppContext.BaseDirectory, "Schemas", "manifest.schema.json")));
        var defs = schema.RootElement.GetProperty("$defs");
        Assert.Equal(Enum.GetValues<QuantizationScheme>().Select(v => WireNames.Format(v)), Strings(defs, "scheme"));
        Assert.Equal(Enum.GetValues<Granularity>().Select(v => WireNames.Format(v)), Strings(defs, "granularity"));
        Assert.Equal(Enum.GetValues<ClipMethod>().Select(v => WireNames.Format(v)), Strings(defs, "clip"));
        Assert.Equal(Enum.GetValues<SearchMethod>().Select(v => WireNames.Format(v)), Strings(defs, "method"));
        Assert.Equal(Enum.GetValues<BudgetMetric>().Select(MetricValues.Name), Strings(defs, "metricName"));
        Assert.Contains("per-channel", Strings(defs, "granularity"));
        Assert.Contains("mse-optimal", Strings(defs, "clip"));
    }

    [Fact]
    public void SameInputsGiveTheSameManifestApartFromCreatedAt()
    {
        var first = Parse(Search(new ErrorBudget(BudgetMetric.Sqnr, 25)).ManifestJson);
        var second = Parse(Search(new ErrorBudget(BudgetMetric.Sqnr, 25)).ManifestJson);
        Assert.True(DateTimeOffset.TryParse((string?)first["createdAt"], out _));
        first["createdAt"] = string.Empty;
        second["createdAt"] = string.Empty;
        Assert.Equal(first.ToJsonString(), second.ToJsonString());
    }

    private static SearchResult Search(Budget budget, StorageRule storage = StorageRule.Container)
    {
        var model = SmallModels.Mlp();
        return SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(budget, [2, 4, 8], Storage: storage), new InMemoryTrialStore(), null, CancellationToken.None);
    }

    private static JsonNode Parse(byte[] json) => JsonNode.Parse(json) ?? throw new InvalidOperationException("The manifest JSON is null.");

    private static EvaluationResults Evaluate(JsonNode manifest)
    {
        using var document = JsonDocument.Parse(manifest.ToJsonString());
        return Schema.Value.Evaluate(document.RootElement, new EvaluationOptions { OutputFormat = OutputFormat.List, RequireFormatValidation = true });
    }

    private static void AssertValid(JsonNode manifest)
    {
        var results = Evaluate(manifest);
        Assert.True(results.IsValid, "The manifest does not match the schema:\n" + Describe(results));
    }

    private static void AssertInvalid(JsonNode manifest) =>
        Assert.False(Evaluate(manifest).IsValid, "The schema accepted a broken manifest.");

    private static string Describe(EvaluationResults results)
    {
        var text = new StringBuilder();
        foreach (var detail in results.Details ?? [])
        {
            foreach (var (keyword, message) in detail.Errors ?? new Dictionary<string, string>())
            {
                text.Append(detail.InstanceLocation).Append(' ').Append(keyword).Append(": ").AppendLine(message);
            }
        }

        return text.ToString();
    }

    /// <summary>Walks a dotted path ("layers.0.bits") to the parent of its last step.</summary>
    private static (JsonNode Parent, string Key) Locate(JsonNode root, string path)
    {
        var steps = path.Split('.');
        var node = root;
        foreach (var step in steps[..^1])
        {
            node = (int.TryParse(step, out var index) ? node[index] : node[step])
                ?? throw new InvalidOperationException($"'{path}' passes through a null at '{step}'.");
        }

        return (node, steps[^1]);
    }

    private static string[] Strings(JsonElement defs, string name) =>
        defs.GetProperty(name).GetProperty("enum").EnumerateArray().Select(e => e.GetString()!).ToArray();
}
