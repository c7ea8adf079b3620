using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

public sealed class SearchRunnerActivationTests
{
    private static readonly int[] Bits = [2, 4, 8];

    [Fact]
    public void SearchWithActivationsMeetsItsBudgetWhenMeasuredAgainAndExportsActivationQdq()
    {
        var model = SmallModels.Mlp(opset: 13);
        var data = SmallModels.MlpData(model);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), Bits, QuantizeActivations: true);
        var store = new InMemoryTrialStore();

        var result = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        Assert.True(result.MeasuredError >= 25);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.True(manifest.Settings.Activations);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Activations: ActivationCalibration.MinMax));
        var assignment = manifest.Layers.ToDictionary(l => l.Name, l => new LayerSetting(l.Bits!.Value));
        Assert.Equal(result.MeasuredError, session.MeasureAssignment(assignment).SqnrDb, 9);

        // Every integer layer carries its activation's scale and zero point, and the model its QDQ pair.
        var integerLayers = manifest.Layers.Where(l => BitWidths.IsInteger(l.Bits!.Value)).ToList();
        Assert.NotEmpty(integerLayers);
        foreach (var layer in integerLayers)
        {
            var expected = session.Activations.Single(a => a.Layer == layer.Name);
            var written = Assert.Single(layer.Activations!);
            Assert.Equal((expected.Tensor, expected.Scale, expected.ZeroPoint), (written.Tensor, written.Scale, written.ZeroPoint));
        }

        var exported = SmallModels.Parse(result.QuantizedModel!);
        Assert.Equal(integerLayers.Count, exported.Graph.Node.Count(n => n.OpType == "QuantizeLinear"));

        // The size the search planned with is the written file's, activation QDQ pairs included (within the
        // graph's length prefix).
        Assert.Equal(result.QuantizedModel!.Length, manifest.Totals!.ModelFileBytes);
        Assert.InRange(manifest.Totals.Bytes, manifest.Totals.ModelFileBytes!.Value - 4, manifest.Totals.ModelFileBytes.Value + 4);
        Assert.All(store.LoadAll().Keys.Where(k => k != TrialKeys.Reference), k => Assert.EndsWith("/activations-min-max", k));
    }

    [Fact]
    public void ActivationSearchNeverReusesStoredWeightOnlyTrials()
    {
        var model = SmallModels.Mlp(opset: 13);
        var data = SmallModels.MlpData(model);
        var weightsOnly = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), Bits);
        var store = new InMemoryTrialStore();
        SearchRunner.Run(model, data, weightsOnly, store, null, CancellationToken.None);
        var before = store.LoadAll().Keys.ToHashSet();

        SearchRunner.Run(model, data, weightsOnly with { QuantizeActivations = true }, store, null, CancellationToken.None);

        var trials = store.LoadAll();
        var added = trials.Keys.Where(k => !before.Contains(k)).ToList();
        Assert.Equal(model.Layers.Count * Bits.Length, added.Count(k => k.StartsWith("sensitivity/", StringComparison.Ordinal)));
        foreach (var layer in model.Layers)
        {
            var eight = new LayerSetting(8);
            var alone = trials[TrialKeys.Sensitivity(layer.Name, eight)].Metrics.SqnrDb;
            var both = trials[TrialKeys.Sensitivity(layer.Name, eight, ActivationCalibration.MinMax)].Metrics.SqnrDb;
            Assert.True(both < alone, $"{layer.Name}: {both:0.00} dB with activations, {alone:0.00} dB without");
        }
    }

    [Fact]
    public void ActivationsOnAnOpset11ModelAreRefusedBeforeAnyWork()
    {
        var model = SmallModels.Mlp(opset: 11);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), Bits, QuantizeActivations: true);
        var store = new InMemoryTrialStore();

        var error = Assert.Throws<EngineException>(() => SearchRunner.Run(model, SmallModels.MlpData(model), settings, store, null, CancellationToken.None));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("needs opset 13; the model's opset is 11", error.Message);
        Assert.Contains("never raised", error.Message);
        Assert.Empty(store.LoadAll());
    }

    [Fact]
    public void ActivationsOfALayerInsideAnIfBodyAreRefusedUnlessTheLayerIsExcluded()
    {
        var model = OnnxModel.Load(Onnx.WeightLocationTests.IfModel(), "if");
        // The If model's scalar condition cannot come from a dataset; the validator reads a dataset only for its labels.
        var data = SmallModels.MlpData(SmallModels.Mlp());
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), Bits, QuantizeActivations: true);

        var error = Assert.Throws<EngineException>(() => SearchSettingsValidator.Validate(model, data, settings));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("'choose/then_branch/fc'", error.Message);
        SearchSettingsValidator.Validate(model, data, settings with { Excluded = [model.Layers[0].Name] });
    }

    [Fact]
    public void PercentileWeightClippingCalibratesActivationsAtAPercentileToo()
    {
        Assert.Equal(ActivationCalibration.Percentile, SensitivitySweep.ActivationsFor(new SearchSettings(new SizeBudget(1000, null), Bits, Clip: ClipMethod.Percentile, QuantizeActivations: true)));
        Assert.Equal(ActivationCalibration.MinMax, SensitivitySweep.ActivationsFor(new SearchSettings(new SizeBudget(1000, null), Bits, Clip: ClipMethod.MseOptimal, QuantizeActivations: true)));
        Assert.Null(SensitivitySweep.ActivationsFor(new SearchSettings(new SizeBudget(1000, null), Bits, Clip: ClipMethod.Percentile)));
        Assert.Equal("validation/abc/activations-percentile", TrialKeys.Validation("abc", ActivationCalibration.Percentile));
        Assert.Equal("validation/abc", TrialKeys.Validation("abc"));
    }
}
