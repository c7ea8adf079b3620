using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

public sealed class ActivationQdqTests
{
    [Fact]
    public void ExportWithActivationQdqReproducesTheValidationTrialWhenRunUnoptimised()
    {
        var model = SmallModels.Mlp(opset: 13);
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Activations: ActivationCalibration.MinMax));
        var assignment = Assignment(model, [8, 4, 32]);
        var trial = ValidationTrial(session, model, assignment);

        var exported = QdqExporter.Export(model, assignment, session.Activations);

        // Activation QDQ only in front of the two quantized layers, as uint8 per-tensor (ONNX QuantizeLinear, opset 13).
        var proto = SmallModels.Parse(exported.Bytes);
        var quantizers = proto.Graph.Node.Where(n => n.OpType == "QuantizeLinear").ToList();
        Assert.Equal(2, quantizers.Count);
        Assert.Equal(["x", "h1"], quantizers.Select(q => q.Input[0]));
        foreach (var q in quantizers)
        {
            var zeroPoint = proto.Graph.Initializer.Single(t => t.Name == q.Input[2]);
            Assert.Equal((int)P.TensorProto.Types.DataType.Uint8, zeroPoint.DataType);
            Assert.Empty(zeroPoint.Dims);
        }

        Assert.Equal("h3", proto.Graph.Node.Single(n => n.Name == model.Layers[2].Name).Input[0]);

        // ONNX Runtime's own QuantizeLinear/DequantizeLinear kernels, no graph rewrites: what the trial measured.
        var unoptimised = Run(exported.Bytes, data, GraphOptimizationLevel.ORT_DISABLE_ALL);
        var metrics = OutputComparer.Compare(trial, unoptimised, null);
        Assert.True(metrics.RelativeMse < 1e-10, $"unoptimised export differs from the trial: relative MSE {metrics.RelativeMse}");
    }

    [Fact]
    public void ExportWithActivationQdqStaysCloseToTheTrialUnderDefaultOptimisations()
    {
        var model = SmallModels.Mlp(opset: 13);
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Activations: ActivationCalibration.MinMax));
        var assignment = Assignment(model, [8, 8, 8]);
        var trial = ValidationTrial(session, model, assignment);
        var exported = QdqExporter.Export(model, assignment, session.Activations);

        // Next to uint8 activations the 8-bit weights are stored as uint8 too: ONNX Runtime's uint8 x int8 kernels on
        // x86 CPUs without VNNI saturate 16-bit pair sums (this assertion's limit failed at 1.05e-3 with int8 weights
        // on an AVX2-only machine); uint8 x uint8 does not.
        var proto = SmallModels.Parse(exported.Bytes);
        foreach (var layer in model.Layers)
        {
            var stored = proto.Graph.Initializer.Single(t => t.Name == layer.WeightName + "#levels");
            Assert.Equal((int)P.TensorProto.Types.DataType.Uint8, stored.DataType);
        }

        // ONNX Runtime may fuse the QDQ pairs into integer kernels; the quantization grid is the same, only the
        // accumulation order and the float rescaling differ.
        var optimised = Run(exported.Bytes, data, GraphOptimizationLevel.ORT_ENABLE_ALL);
        var metrics = OutputComparer.Compare(trial, optimised, null);
        Console.WriteLine($"activation QDQ export, ORT defaults vs trial: relative MSE {metrics.RelativeMse:E3} ({metrics.SqnrDb:0.0} dB)");
        Assert.True(metrics.RelativeMse < 1e-8, $"optimised export differs from the trial: relative MSE {metrics.RelativeMse}");
    }

    [Fact]
    public void ActivationQdqBelowOpset13IsRefused()
    {
        var model = SmallModels.Mlp(opset: 11);
        var activations = new[] { new ActivationQuantization(model.Layers[0].Name, model.Layers[0].Name, "x", 0.02f, 128) };

        var error = Assert.Throws<EngineException>(() => QdqExporter.Export(model, Assignment(model, [8, 8, 8]), activations));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("never raised", error.Message);
    }

    private static Dictionary<string, LayerSetting> Assignment(OnnxModel model, int[] bits) =>
        model.Layers.Select((l, i) => (l.Name, Setting: new LayerSetting(bits[i])))
            .ToDictionary(p => p.Name, p => p.Setting);

    private static IReadOnlyList<OutputTensor> ValidationTrial(TrialSession session, OnnxModel model, IReadOnlyDictionary<string, LayerSetting> assignment)
    {
        var quantized = assignment.Where(p => BitWidths.IsInteger(p.Value.Bits)).ToList();
        return session.RunFull(
            quantized.ToDictionary(p => p.Key, p => session.Quantized(model.Layers.Single(l => l.Name == p.Key), p.Value)),
            quantized.Select(p => p.Key).ToList());
    }

    private static List<OutputTensor> Run(byte[] bytes, CalibrationSet data, GraphOptimizationLevel level)
    {
        using var options = new SessionOptions { GraphOptimizationLevel = level };
        return ExportedModelRunner.Run(bytes, data, options);
    }
}
