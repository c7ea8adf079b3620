using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Bias correction (Nagel et al. 2019) as trials run it and the export writes it, on one-layer graphs built here whose
/// output is the layer's output, fed inputs with a mean far from zero (where quantization moves the mean output most).
/// The published property checked in the running trial: the quantized layer's mean output per output unit equals the
/// FP32 layer's on the calibration inputs. Outside reference: ONNX Runtime runs the exported file, whose outputs must be
/// the trial's, and the file's bias must be the one the trial was fed.
/// </summary>
public sealed class BiasCorrectedTrialTests
{
    private const int Samples = 12;

    private static readonly string[] LinearKinds = ["conv", "conv-no-bias", "conv-constant-bias", "depthwise", "gemm-alpha-beta", "gemm-no-c", "matmul"];

    public static TheoryData<string> Layers => [.. LinearKinds];

    /// <summary>The layers above and recurrent ones, whose mean output the gates' nonlinearity hides (W's bias is B's first half).</summary>
    public static TheoryData<string> Exported => [.. LinearKinds, "lstm", "gru-no-b"];

    [Theory]
    [MemberData(nameof(Layers))]
    public void TheRunningTrialPutsTheMeanOutputBackOnTheFloatOne(string kind)
    {
        var (model, data) = Build(kind);
        var rounder = Rounder(model, data);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Rounder: rounder));
        var layer = model.Layers.Single();
        Assert.Empty(rounder.UncorrectedBiases);
        foreach (var rounding in new[] { RoundingMethod.Nearest, RoundingMethod.Compensated })
        {
            var setting = new LayerSetting(2, Rounding: rounding, BiasCorrection: true);
            var weight = session.Quantized(layer, setting);
            var corrected = session.RunFull(Only(layer, weight), null, Only(layer, rounder.CorrectedBias(layer, setting)!))[0];
            var plain = session.RunFull(Only(layer, weight))[0];
            var reference = session.ReferenceOutputs[0];

            var want = UnitMeans(reference);
            var got = UnitMeans(corrected);
            var before = UnitMeans(plain);
            var scale = want.Max(Math.Abs) + 1;
            var restored = want.Zip(got, (a, b) => Math.Abs(a - b)).Max();
            var moved = want.Zip(before, (a, b) => Math.Abs(a - b)).Max();

            // Float tolerance: the means are sums of a few hundred FP32 products.
            Assert.True(restored <= 2e-5 * scale, $"{kind} {rounding}: mean output off by {restored:g3} after correction");
            Assert.True(moved > 100 * restored && moved > 1e-3 * scale, $"{kind} {rounding}: 2-bit weights moved the mean output by only {moved:g3}, so the check proves nothing");

            // The sweep's own path feeds the bias too: a constant per unit off the error lowers the MSE, never raises it.
            var sqnrCorrected = session.MeasureLayer(layer, setting).SqnrDb;
            var sqnrPlain = session.MeasureLayer(layer, setting with { BiasCorrection = false }).SqnrDb;
            Assert.True(sqnrCorrected > sqnrPlain, $"{kind} {rounding}: {sqnrCorrected:0.00} dB corrected against {sqnrPlain:0.00} dB");
        }
    }

    [Theory]
    [MemberData(nameof(Exported))]
    public void OnnxRuntimeOnTheExportedFileGivesTheTrialsOutputsAndTheSizeIsPredicted(string kind)
    {
        var (model, data) = Build(kind);
        var rounder = Rounder(model, data);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Rounder: rounder));
        var layer = model.Layers.First();
        Assert.DoesNotContain(layer.Name, rounder.UncorrectedBiases.Keys);
        var setting = new LayerSetting(3, Rounding: RoundingMethod.Compensated, BiasCorrection: true);
        var bias = rounder.CorrectedBias(layer, setting)!;
        var trial = session.RunFull(Only(layer, session.Quantized(layer, setting)), null, Only(layer, bias))[0];

        var assignment = new Dictionary<string, LayerSetting> { [layer.Name] = setting };
        var exported = QdqExporter.Export(model, assignment, null, rounder);
        // Run as the export's note says a MatMul behind DequantizeLinear must run to compute what was measured.
        using var options = new Microsoft.ML.OnnxRuntime.SessionOptions();
        options.AddSessionConfigEntry(QdqExporter.MatMulAccuracyOption, "1");
        var fromFile = ExportedModelRunner.Run(exported.Bytes, data, options)[0];
        Assert.True(OrtRunner.MaxRelativeDifference(trial.Data, fromFile.Data) <= 1e-5, $"{kind}: the exported model's output differs from the trial's");

        // The file's bias is the one the trial was fed, value for value.
        Assert.Equal(bias, WrittenBias(P.ModelProto.Parser.ParseFrom(exported.Bytes), layer));
        if (layer.Op is "LSTM" or "GRU")
        {
            // Only W's half of each direction moves; R's half (Rb) is what was uploaded (zeros without a B).
            var rows = (int)layer.Shape[1];
            var original = model.Proto.Graph.Initializer.FirstOrDefault(t => t.Name == "b") is { } b ? TensorCodec.ToFloats(b) : new float[bias.Length];
            var inputs = LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20)[layer.Name];
            var shift = BiasCorrection.Shift(model.GetWeight(layer), rounder.Dequantized(layer, setting), inputs.Layout, inputs.Moments);
            for (var d = 0; d < layer.Shape[0]; d++)
            {
                for (var j = 0; j < rows; j++)
                {
                    Assert.Equal((float)(original[(d * 2 * rows) + j] + (double)shift[(d * rows) + j]), bias[(d * 2 * rows) + j]);
                    Assert.Equal(original[(d * 2 * rows) + rows + j], bias[(d * 2 * rows) + rows + j]);
                }
            }
        }

        var sizer = new ModelSizer(model, StorageRule.Container, biasFileBytes: rounder.BiasFileBytes());
        var predicted = sizer.OtherBytes + model.Layers.Sum(l => sizer.LayerBytes(l, assignment.GetValueOrDefault(l.Name) ?? LayerSetting.KeepFloat32));
        Assert.True(Math.Abs(predicted - exported.FileBytes) <= 4, $"{kind}: predicted {predicted} B, written {exported.FileBytes} B");
    }

    [Fact]
    public void WidthsMeasuredTogetherKeepTheirCorrectedBiases()
    {
        // The opt-in stacked sweep (several widths per run) must give each bias-corrected width the figure it gets alone.
        var (model, data) = Build("conv");
        var layer = model.Layers.Single();
        var rounder = Rounder(model, data);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Rounder: rounder, ConstantSuffixes: true, MaxWidthsPerRun: 4));
        LayerSetting[] settings = [new(2, BiasCorrection: true), new(3, BiasCorrection: true), new(4, BiasCorrection: true)];

        var together = session.MeasureLayerWidths(layer, settings, settings.Length);

        for (var i = 0; i < settings.Length; i++)
        {
            Assert.Equal(session.MeasureLayer(layer, settings[i], settings.Length).SqnrDb, together[i].SqnrDb, 6);
        }
    }

    [Fact]
    public void BiasCorrectionAloneGathersMeansOnlyAndCorrectsTheSame()
    {
        var (model, data) = Build("conv");
        var layer = model.Layers.Single();
        var meansOnly = new WeightRounder(model, LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20, secondMoments: false), correctBiases: true);
        var setting = new LayerSetting(3, BiasCorrection: true);

        Assert.False(meansOnly.Compensates(layer.Name));
        Assert.Equal(RoundingMethod.Nearest, meansOnly.RoundingFor(layer.Name, setting with { Rounding = RoundingMethod.Compensated }));
        Assert.Equal(Rounder(model, data).CorrectedBias(layer, setting), meansOnly.CorrectedBias(layer, setting));
    }

    [Fact]
    public void TheKeyOfACorrectedTrialNeverMatchesAnUncorrectedOne()
    {
        var plain = new LayerSetting(4, Rounding: RoundingMethod.Compensated);
        var corrected = plain with { BiasCorrection = true };

        Assert.Equal("sensitivity/fc/4b-symmetric-per-channel-min-max-compensated-bias-corrected", TrialKeys.Sensitivity("fc", corrected));
        Assert.NotEqual(TrialKeys.Sensitivity("fc", plain), TrialKeys.Sensitivity("fc", corrected));
        Assert.NotEqual(
            TrialKeys.AssignmentHash(new Dictionary<string, LayerSetting> { ["fc"] = plain }),
            TrialKeys.AssignmentHash(new Dictionary<string, LayerSetting> { ["fc"] = corrected }));
    }

    [Fact]
    public void ALayerThatCannotBeCorrectedIsNamedWithTheReason()
    {
        // One weight read by two MatMuls (tied): each reader has its own inputs, so one mean cannot correct both.
        var bytes = new GraphBuilder()
            .Input("x", -1, 6)
            .Initializer("w", [6, 6], GraphBuilder.RandomValues(3, 36))
            .Node("MatMul", ["x", "w"], ["h"], "first")
            .Node("MatMul", ["h", "w"], ["y"], "second")
            .Output("y", -1, 6)
            .ToBytes();
        var model = OnnxModel.Load(bytes, "tied");
        var data = Data(model, [Samples, 6]);
        var rounder = Rounder(model, data);

        var reason = Assert.Single(rounder.UncorrectedBiases).Value;
        Assert.Contains("tied", reason, StringComparison.Ordinal);
        Assert.Null(rounder.CorrectedBias(model.Layers[0], new LayerSetting(4, BiasCorrection: true)));
    }

    /// <summary>The bias a layer reads in a written model: its bias input (or the MatMul's Add), an initializer or a Constant.</summary>
    internal static float[] WrittenBias(P.ModelProto proto, WeightLayer layer)
    {
        var node = proto.Graph.Node.Single(n => n.Name == layer.Consumers[0]);
        var name = node.OpType switch
        {
            "MatMul" => proto.Graph.Node.Single(n => n.OpType == "Add" && n.Input.Contains(node.Output[0])).Input[1],
            "LSTM" or "GRU" or "RNN" => node.Input[3],
            _ => node.Input[2],
        };
        var written = proto.Graph.Initializer.FirstOrDefault(t => t.Name == name)
            ?? proto.Graph.Node.Single(n => n.OpType == "Constant" && n.Output[0] == name).Attribute.Single(a => a.Name == "value").T;
        return TensorCodec.ToFloats(written);
    }

    private static WeightRounder Rounder(OnnxModel model, CalibrationSet data) =>
        new(model, LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20), correctBiases: true);

    private static Dictionary<string, float[]> Only(WeightLayer layer, float[] values) => new(StringComparer.Ordinal) { [layer.Name] = values };

    /// <summary>Mean of each output unit (axis 1) over the samples and every other axis.</summary>
    private static double[] UnitMeans(OutputTensor output)
    {
        var units = (int)output.Shape[1];
        var inner = (int)output.Shape.Skip(2).Aggregate(1L, (a, b) => a * b);
        var sums = new double[units];
        for (var i = 0; i < output.Data.Length; i++)
        {
            sums[(i / inner) % units] += output.Data[i];
        }

        return sums.Select(s => s / (output.Data.Length / units)).ToArray();
    }

    private static (OnnxModel Model, CalibrationSet Data) Build(string kind)
    {
        var builder = new GraphBuilder();
        long[] input;
        switch (kind)
        {
            case "conv" or "conv-no-bias" or "conv-constant-bias" or "depthwise":
                var depthwise = kind == "depthwise";
                long[] weightDims = depthwise ? [4, 1, 3, 3] : [5, 4, 3, 3];
                var weightCount = (int)weightDims.Aggregate(1L, (a, b) => a * b);
                var outputs = weightDims[0];
                input = [Samples, 4, 6, 6];
                builder.Input("x", -1, 4, 6, 6).Initializer("w", weightDims, GraphBuilder.RandomValues(7, weightCount, 0.4f));
                var inputs = new List<string> { "x", "w" };
                if (kind == "conv-constant-bias")
                {
                    builder.Constant("b", [outputs], GraphBuilder.RandomValues(8, (int)outputs, 0.2f));
                    inputs.Add("b");
                }
                else if (kind != "conv-no-bias")
                {
                    builder.Initializer("b", [outputs], GraphBuilder.RandomValues(8, (int)outputs, 0.2f));
                    inputs.Add("b");
                }

                builder.Node("Conv", [.. inputs], ["y"], "conv", GraphBuilder.IntsAttribute("pads", 1, 1, 1, 1), GraphBuilder.IntAttribute("group", depthwise ? 4 : 1))
                    .Output("y", -1, outputs, 6, 6);
                break;
            case "gemm-alpha-beta":
                input = [Samples, 6];
                builder.Input("x", -1, 6)
                    .Initializer("w", [5, 6], GraphBuilder.RandomValues(7, 30, 0.5f))
                    .Initializer("c", [5], GraphBuilder.RandomValues(8, 5, 0.2f))
                    .Node("Gemm", ["x", "w", "c"], ["y"], "gemm", GraphBuilder.IntAttribute("transB", 1), GraphBuilder.FloatAttribute("alpha", 0.5f), GraphBuilder.FloatAttribute("beta", 2f))
                    .Output("y", -1, 5);
                break;
            case "gemm-no-c":
                input = [Samples, 6];
                builder.Input("x", -1, 6)
                    .Initializer("w", [6, 5], GraphBuilder.RandomValues(7, 30, 0.5f))
                    .Node("Gemm", ["x", "w"], ["y"], "gemm")
                    .Output("y", -1, 5);
                break;
            case "lstm" or "gru-no-b":
                // X is [steps, n, input]; a bidirectional LSTM with B, a forward GRU without one.
                var lstm = kind == "lstm";
                var (directions, gates, hidden) = (lstm ? 2 : 1, lstm ? 4 : 3, 3);
                input = [Samples, 4, 5];
                builder.Input("x", -1, 4, 5)
                    .Node("Transpose", ["x"], ["xt"], "to_time_major", GraphBuilder.IntsAttribute("perm", 1, 0, 2))
                    .Initializer("w", [directions, gates * hidden, 5], GraphBuilder.RandomValues(7, directions * gates * hidden * 5, 0.6f))
                    .Initializer("r", [directions, gates * hidden, hidden], GraphBuilder.RandomValues(8, directions * gates * hidden * hidden, 0.6f));
                if (lstm)
                {
                    builder.Initializer("b", [directions, 2 * gates * hidden], GraphBuilder.RandomValues(9, directions * 2 * gates * hidden, 0.1f))
                        .Node("LSTM", ["xt", "w", "r", "b"], ["yseq"], "rnn", GraphBuilder.IntAttribute("hidden_size", hidden), new P.AttributeProto { Name = "direction", Type = P.AttributeProto.Types.AttributeType.String, S = Google.Protobuf.ByteString.CopyFromUtf8("bidirectional") });
                }
                else
                {
                    builder.Node("GRU", ["xt", "w", "r"], ["yseq"], "rnn", GraphBuilder.IntAttribute("hidden_size", hidden));
                }

                builder.Node("Transpose", ["yseq"], ["y"], "to_batch_major", GraphBuilder.IntsAttribute("perm", 2, 0, 1, 3))
                    .Output("y", -1, 4, directions, hidden);
                break;
            default:
                input = [Samples, 6];
                builder.Input("x", -1, 6)
                    .Initializer("w", [6, 5], GraphBuilder.RandomValues(7, 30, 0.5f))
                    .Node("MatMul", ["x", "w"], ["y"], "matmul")
                    .Output("y", -1, 5);
                break;
        }

        var model = OnnxModel.Load(builder.ToBytes(), kind);
        return (model, Data(model, input));
    }

    /// <summary>Inputs around 1.5 (uniform on [1, 2]): a mean far from zero, as after a ReLU or an image's offset.</summary>
    private static CalibrationSet Data(OnnxModel model, long[] shape)
    {
        var random = new Random(21);
        var values = new float[shape.Aggregate(1L, (a, b) => a * b)];
        for (var i = 0; i < values.Length; i++)
        {
            values[i] = 1 + random.NextSingle();
        }

        return CalibrationSet.Create([new NpyArray("x", ElementType.Float32, shape, values)], model.Inputs);
    }
}
