using System.Text.Json;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// GET /v1/searches/{id}/trials gives every trial with the assignment it measured, so a trial can be run again
/// from the store alone. Outside check: ONNX Runtime (through a fresh trial session on the uploaded model and
/// dataset) measures the stored assignment again and gives the stored figure.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class TrialPagesTests(RealEngineFixture fixture, DemoFolderFixture demo) : IClassFixture<RealEngineFixture>
{
    /// <summary>The properties of one trial, in trial pages and in the command line's trials.json alike.</summary>
    public static readonly string[] TrialProperties = ["key", "kind", "layer", "bits", "assignmentHash", "metrics", "durationMs", "assignment", "activations", "reusedFrom"];

    private static readonly JsonSerializerOptions Wire = new(JsonSerializerDefaults.Web)
    {
        NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals,
        Converters = { WireNames.JsonConverter },
    };

    private readonly HttpClient client = fixture.Factory.CreateAuthorizedClient();

    [Fact]
    public async Task AStoredValidationTrialRunAgainFromItsAssignmentGivesTheStoredFigure()
    {
        var modelBytes = File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName));
        var dataBytes = File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName));
        var (modelId, datasetId) = await client.UploadAsync("replay.onnx", modelBytes, dataBytes);
        var started = await client.StartSearchAsync(new
        {
            modelId,
            datasetId,
            budget = new { metric = "sqnr", atLeast = 30 },
            bits = new[] { 2, 4, 8 },
            scheme = "asymmetric",
            clip = "mse-optimal",
        });
        var search = await RealEngineWalkthroughTests.WaitForEndAsync(client, started.GetProperty("id").GetString()!);
        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        var manifest = await (await client.GetAsync($"/v1/searches/{search.GetProperty("id").GetString()}/manifest")).JsonAsync();
        var page = await (await client.GetAsync($"/v1/searches/{search.GetProperty("id").GetString()}/trials?limit=1000")).JsonAsync();
        var trials = page.GetProperty("items").EnumerateArray().ToList();
        Assert.All(trials, t => Assert.Equal(TrialProperties, t.EnumerateObject().Select(p => p.Name)));

        // Only the store's record: the assignment, not the search's settings, says how each layer was quantized.
        var chosenDb = manifest.GetProperty("totals").GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
        var chosen = trials.Single(t => t.GetProperty("kind").GetString() == "validation"
            && t.GetProperty("metrics").GetProperty("sqnrDb").GetDouble() == chosenDb);
        var assignment = chosen.GetProperty("assignment").Deserialize<Dictionary<string, LayerSetting>>(Wire)!;
        var layers = manifest.GetProperty("layers").EnumerateArray().ToList();
        Assert.Equal(layers.Select(l => l.GetProperty("name").GetString()).Order(), assignment.Keys.Order());
        Assert.All(layers, l => Assert.Equal(l.GetProperty("bits").GetInt32(), assignment[l.GetProperty("name").GetString()!].Bits));
        Assert.All(assignment.Values, s => Assert.Equal((QuantizationScheme.Asymmetric, ClipMethod.MseOptimal), (s.Scheme, s.Clip)));
        Assert.Equal(chosen.GetProperty("assignmentHash").GetString(), TrialKeys.AssignmentHash(assignment));

        // The default rounding (compensated, biases corrected) takes each layer's input moments from the calibration set,
        // gathered as the search gathered them.
        Assert.All(assignment.Values, s => Assert.Equal((RoundingMethod.Compensated, true), (s.Rounding, s.BiasCorrection)));
        var model = OnnxModel.Load(modelBytes, "replay.onnx");
        var data = CalibrationSet.Create(DatasetReader.Read(dataBytes), model.Inputs);
        var defaults = new TrialSessionOptions();
        var rounder = WeightRounder.Gather(model, data, model.Layers, secondMoments: true, correctBiases: true, defaults.MaxBatch, defaults.MaxCachedActivationBytes);
        using var session = TrialSession.Open(model, data, defaults with { Rounder = rounder });
        var again = session.MeasureAssignment(assignment);
        Assert.Equal(chosenDb, again.SqnrDb, 9);
        Assert.Equal(chosen.GetProperty("metrics").GetProperty("relativeMse").GetDouble(), again.RelativeMse, 12);

        // A sensitivity trial records its one layer (every other layer FP32): run in full it gives its figure
        // to float rounding (the sweep may have run only the graph below the layer).
        var sensitivity = trials.First(t => t.GetProperty("kind").GetString() == "sensitivity" && t.GetProperty("bits").GetInt32() == 4);
        var one = sensitivity.GetProperty("assignment").Deserialize<Dictionary<string, LayerSetting>>(Wire)!;
        Assert.Equal(sensitivity.GetProperty("layer").GetString(), Assert.Single(one.Keys));
        Assert.Equal(sensitivity.GetProperty("metrics").GetProperty("sqnrDb").GetDouble(), session.MeasureAssignment(one).SqnrDb, 4);
        var reference = trials.Single(t => t.GetProperty("kind").GetString() == "reference");
        Assert.Empty(reference.GetProperty("assignment").EnumerateObject());
    }
}
