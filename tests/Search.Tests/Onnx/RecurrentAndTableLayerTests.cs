using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// LSTM, GRU and RNN weights (W and R) and Gather tables (alone and tied to an output MatMul/Gemm) are layers:
/// found, quantized along their documented axis, and exported in QDQ form that ONNX Runtime runs to exactly
/// what ONNX Runtime gives on the FP32 model with the fake-quantized weights (the reference: ORT's own
/// LSTM/GRU/RNN/Gather/DequantizeLinear operators).
/// </summary>
public sealed class RecurrentAndTableLayerTests
{
    private const int Samples = 6;
    private const int Steps = 5;
    private const int InputSize = 4;
    private const int Hidden = 3;

    public static TheoryData<string, int, string> RecurrentCases => new()
    {
        { "LSTM", 4, "forward" },
        { "LSTM", 4, "bidirectional" },
        { "GRU", 3, "forward" },
        { "GRU", 3, "bidirectional" },
        { "RNN", 1, "forward" },
        { "RNN", 1, "bidirectional" },
    };

    [Theory]
    [MemberData(nameof(RecurrentCases))]
    public void RecurrentWeightsAreTwoLayersQuantizedPerGateRowAndTheirQdqExportRunsLikeTheFakeQuantizedModel(string op, int gates, string direction)
    {
        var directions = direction == "bidirectional" ? 2 : 1;
        var bytes = RecurrentModel(op, gates, direction);

        var model = OnnxModel.Load(bytes, "rnn");

        Assert.Equal([$"{op}_1.W", $"{op}_1.R"], model.Layers.Select(l => l.Name));
        Assert.All(model.Layers, l => Assert.Equal((op, 1, (long)gates * Hidden), (l.Op, l.ChannelAxis, l.Channels)));
        Assert.Equal([directions, gates * Hidden, InputSize], model.Layers[0].Shape);
        Assert.Equal([directions, gates * Hidden, Hidden], model.Layers[1].Shape);
        Assert.Equal(["w", "r"], model.Layers.Select(l => l.WeightName));

        // The bias B is not a layer and, being a bias, not a skipped weight either.
        Assert.Empty(model.Skipped);
        foreach (var scheme in new[] { QuantizationScheme.Symmetric, QuantizationScheme.Asymmetric })
        {
            var assignment = new Dictionary<string, LayerSetting>
            {
                [model.Layers[0].Name] = new(4, scheme),
                [model.Layers[1].Name] = new(3, scheme),
            };
            AssertExportRunsLikeFakeQuantized(model, assignment, SequenceFeeds(), expectedAxis: 1);
        }
    }

    /// <summary>
    /// Compensated rounding reaches a recurrent W, whose input vectors are the rows of X (every step of every sample);
    /// the moments gathered from ONNX Runtime's run must be Σ x xᵀ of the fed sequence, recomputed here. R (fed by the
    /// op's hidden state) has no input the graph exposes and stays at nearest.
    /// </summary>
    [Theory]
    [InlineData("LSTM", 4, "bidirectional")]
    [InlineData("GRU", 3, "forward")]
    public void RecurrentWGetsTheMomentsOfItsInputSequenceAndRStaysAtNearest(string op, int gates, string direction)
    {
        var model = OnnxModel.Load(RecurrentModel(op, gates, direction), "rnn");
        var x = GraphBuilder.RandomValues(3, Samples * Steps * InputSize, 1.5f);
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [Samples, Steps, InputSize], x)], model.Inputs);

        var inputs = LayerInputCollector.Collect(model, data, model.Layers, 32, 1L << 30);

        var w = Assert.Single(inputs);
        Assert.Equal($"{op}_1.W", w.Key);
        var directions = direction == "bidirectional" ? 2 : 1;
        Assert.Equal(new LinearLayout(1, directions * gates * Hidden, InputSize, true), w.Value.Layout);
        Assert.Equal(Samples * Steps, w.Value.Moments.Count(0));
        var moment = w.Value.Moments.SecondMoment(0);
        for (var i = 0; i < InputSize; i++)
        {
            for (var j = 0; j < InputSize; j++)
            {
                double expected = 0;
                for (var v = 0; v < Samples * Steps; v++)
                {
                    expected += x[(v * InputSize) + i] * (double)x[(v * InputSize) + j];
                }

                Assert.Equal(expected, moment[(i * InputSize) + j], 4);
            }
        }

        var rounder = new WeightRounder(model, inputs);
        Assert.Equal(RoundingMethod.Nearest, rounder.RoundingFor($"{op}_1.R", new LayerSetting(4, Rounding: RoundingMethod.Compensated)));
        Assert.Equal(RoundingMethod.Compensated, rounder.RoundingFor($"{op}_1.W", new LayerSetting(4, Rounding: RoundingMethod.Compensated)));
    }

    [Fact]
    public void RecurrentWeightsInsideAnIfBranchBehindIdentityAreFound()
    {
        var body = new GraphBuilder()
            .Constant("w_raw", [1, 4 * Hidden, InputSize], GraphBuilder.RandomValues(21, 4 * Hidden * InputSize, 0.5f))
            .Node("Identity", ["w_raw"], ["w_in"], "id")
            .Constant("r_in", [1, 4 * Hidden, Hidden], GraphBuilder.RandomValues(22, 4 * Hidden * Hidden, 0.5f))
            .Node("LSTM", ["xt", "w_in", "r_in"], ["", "yh"], "lstm", GraphBuilder.IntAttribute("hidden_size", Hidden))
            .Output("yh", 1, -1, Hidden)
            .BuildGraph();
        var other = new GraphBuilder().Node("Identity", ["zeros"], ["out"], "pass").Output("out", 1, -1, Hidden).BuildGraph();
        var bytes = new GraphBuilder()
            .Input("x", -1, Steps, InputSize)
            .Initializer("flag", [], [1f])
            .Initializer("zeros", [1, Samples, Hidden], new float[Samples * Hidden])
            .Node("Transpose", ["x"], ["xt"], "to_time_major", Ints("perm", 1, 0, 2))
            .Node("Cast", ["flag"], ["cond"], "cond", GraphBuilder.IntAttribute("to", (long)P.TensorProto.Types.DataType.Bool))
            .Node("If", ["cond"], ["yh"], "branch", GraphBuilder.GraphAttribute("then_branch", body), GraphBuilder.GraphAttribute("else_branch", other))
            .Node("Transpose", ["yh"], ["y"], "to_batch_major", Ints("perm", 1, 0, 2))
            .Output("y", -1, 1, Hidden)
            .ToBytes();

        var model = OnnxModel.Load(bytes, "if-lstm");

        Assert.Equal(["branch/then_branch/lstm.W", "branch/then_branch/lstm.R"], model.Layers.Select(l => l.Name));
        var assignment = model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(4));
        AssertExportRunsLikeFakeQuantized(model, assignment, SequenceFeeds(), expectedAxis: 1);
    }

    [Fact]
    public void GatherTableIsALayerQuantizedPerRow()
    {
        var bytes = new GraphBuilder()
            .Input("ids", P.TensorProto.Types.DataType.Int64, -1, 3)
            .Initializer("table", [10, 6], GraphBuilder.RandomValues(31, 60, 0.8f))
            .Node("Gather", ["table", "ids"], ["y"], "embed")
            .Output("y", -1, 3, 6)
            .ToBytes();

        var model = OnnxModel.Load(bytes, "embed");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("embed", "Gather", "table", 0, 10L), (layer.Name, layer.Op, layer.WeightName, layer.ChannelAxis, layer.Channels));
        var assignment = new Dictionary<string, LayerSetting> { ["embed"] = new(3) };
        AssertExportRunsLikeFakeQuantized(model, assignment, IdFeeds(10, 3), expectedAxis: 0);
    }

    [Fact]
    public void TableTiedToAnOutputMatMulAndGemmIsOneLayerQuantizedPerRowForAllReaders()
    {
        // ids -> Gather(E [16, 8]) -> h [n, 8]; MatMul(h, W [8, 16]) -> s [n, 16]; MatMul(s, E) -> u [n, 8];
        // Gemm(u, E, transB = 1) -> logits [n, 16]. E is read by a Gather, a MatMul and a Gemm.
        var bytes = new GraphBuilder()
            .Input("ids", P.TensorProto.Types.DataType.Int64, -1)
            .Initializer("E", [16, 8], GraphBuilder.RandomValues(41, 128, 0.7f))
            .Initializer("W", [8, 16], GraphBuilder.RandomValues(42, 128, 0.5f))
            .Node("Gather", ["E", "ids"], ["h"], "embed")
            .Node("MatMul", ["h", "W"], ["s"], "mix")
            .Node("MatMul", ["s", "E"], ["u"], "back")
            .Node("Gemm", ["u", "E"], ["logits"], "head", GraphBuilder.IntAttribute("transB", 1))
            .Output("logits", -1, 16)
            .ToBytes();

        var model = OnnxModel.Load(bytes, "tied");

        Assert.Equal(["embed", "mix"], model.Layers.Select(l => l.Name));
        var table = model.Layers[0];
        Assert.Equal(("Gather", 0, 16L), (table.Op, table.ChannelAxis, table.Channels));
        Assert.Equal(["embed", "back", "head"], table.Consumers);
        var assignment = new Dictionary<string, LayerSetting> { ["embed"] = new(4, QuantizationScheme.Asymmetric), ["mix"] = new(5) };
        var feeds = new Dictionary<string, Func<OrtValue>> { ["ids"] = () => OrtValue.CreateTensorValueFromMemory(new long[] { 0, 3, 15, 7, 7, 9 }, [6]) };
        var exported = AssertExportRunsLikeFakeQuantized(model, assignment, feeds, expectedAxis: 0, layerName: "embed");
        Assert.Equal(QdqExporter.MatMulNote, QdqExporter.Export(model, new Dictionary<string, LayerSetting> { ["embed"] = new(4) }).Note);

        // One integer table serves all three readers.
        Assert.Single(exported.Graph.Initializer, t => t.Name == "E#levels");
        Assert.DoesNotContain(exported.Graph.Initializer, t => t.Name == "E");
    }

    [Fact]
    public void SearchSweepsRecurrentAndTableLayersAndTheManifestListsThem()
    {
        var (model, data) = Tagger();

        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), [2, 4, 8]), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.Equal(["embed", "lstm.W", "lstm.R"], manifest.Layers.Select(l => l.Name));
        Assert.All(manifest.Layers, l => Assert.Equal(3, l.Sensitivity.Count));

        // Each sensitivity trial moved the outputs: the layers are really swept, not measured as untouched.
        Assert.All(manifest.Layers, l => Assert.All(l.Sensitivity, s => Assert.NotNull(s.Metrics.SqnrDb)));
        Assert.All(manifest.Layers, l => Assert.Equal("exercised", l.Coverage!.Status));
        Assert.Equal([0, 1, 1], manifest.Layers.Select(l => l.Axis));
    }

    [Fact]
    public void WithActivationsOnOnlyTheRecurrentInputIsQuantizedAndTheTableAndRStayWeightOnly()
    {
        var (model, data) = Tagger();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 15), [4, 8], QuantizeActivations: true);

        var result = SearchRunner.Run(model, data, settings, new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        var layers = ManifestJson.Deserialize(result.ManifestJson).Layers.ToDictionary(l => l.Name);
        Assert.Equal("et", Assert.Single(layers["lstm.W"].Activations!).Tensor);
        Assert.Empty(layers["lstm.R"].Activations!);
        Assert.Empty(layers["embed"].Activations!);
    }

    /// <summary>ids -> Gather(table) -> [n, steps, 4] -> Transpose -> LSTM -> Y_h [1, n, 3] -> Transpose -> [n, 1, 3], with 24 samples of ids.</summary>
    private static (OnnxModel Model, CalibrationSet Data) Tagger()
    {
        var bytes = new GraphBuilder()
            .Input("ids", P.TensorProto.Types.DataType.Int64, -1, Steps)
            .Initializer("table", [12, InputSize], GraphBuilder.RandomValues(51, 12 * InputSize))
            .Initializer("w", [1, 4 * Hidden, InputSize], GraphBuilder.RandomValues(52, 4 * Hidden * InputSize, 0.6f))
            .Initializer("r", [1, 4 * Hidden, Hidden], GraphBuilder.RandomValues(53, 4 * Hidden * Hidden, 0.6f))
            .Node("Gather", ["table", "ids"], ["e"], "embed")
            .Node("Transpose", ["e"], ["et"], "to_time_major", Ints("perm", 1, 0, 2))
            .Node("LSTM", ["et", "w", "r"], ["", "yh"], "lstm", GraphBuilder.IntAttribute("hidden_size", Hidden))
            .Node("Transpose", ["yh"], ["y"], "to_batch_major", Ints("perm", 1, 0, 2))
            .Output("y", -1, 1, Hidden)
            .ToBytes();
        var model = OnnxModel.Load(bytes, "tagger");
        var random = new Random(7);
        var ids = Enumerable.Range(0, 24 * Steps).Select(_ => (long)random.Next(12)).ToArray();
        var data = CalibrationSet.Create([new NpyArray("ids", ElementType.Int64, [24, Steps], ids)], model.Inputs);
        return (model, data);
    }

    /// <summary>
    /// Runs the exported QDQ model and the FP32 model with the same weights fake-quantized, both in ONNX Runtime,
    /// with graph optimisations on as deployment runs them (MatMuls at the accuracy level the export note asks for),
    /// and requires identical outputs.
    /// </summary>
    private static P.ModelProto AssertExportRunsLikeFakeQuantized(
        OnnxModel model,
        IReadOnlyDictionary<string, LayerSetting> assignment,
        IReadOnlyDictionary<string, Func<OrtValue>> feeds,
        int expectedAxis,
        string? layerName = null)
    {
        var exported = QdqExporter.Export(model, assignment);
        Assert.Equal("qdq", exported.Format);
        var proto = P.ModelProto.Parser.ParseFrom(exported.Bytes);
        var checkedLayer = model.Layers.Single(l => l.Name == (layerName ?? model.Layers[0].Name));
        var dequantize = proto.Graph.Node.Single(n => n.OpType == "DequantizeLinear" && n.Output[0] == checkedLayer.WeightName);
        Assert.Equal(expectedAxis, dequantize.Attribute.Single(a => a.Name == "axis").I);

        var fakeQuantized = assignment.ToDictionary(
            p => p.Key,
            p =>
            {
                var layer = model.Layers.Single(l => l.Name == p.Key);
                var snapped = new float[layer.ParameterCount];
                WeightQuantizer.FakeQuantize(model.GetWeight(layer), layer.Shape, layer.ChannelAxis, p.Value, snapped);
                return snapped;
            });
        var expected = OrtRunner.Run(model.BuildWithWeights(fakeQuantized), feeds, optimise: true);
        // The fused DequantizeLinear+MatMul computes in FP32 only at accuracy level 1 (see QdqExporter.MatMulNote).
        var actual = OrtRunner.Run(exported.Bytes, feeds, optimise: true, o => o.AddSessionConfigEntry(QdqExporter.MatMulAccuracyOption, "1"));
        var fp32 = OrtRunner.Run(model.BuildWithWeights(new Dictionary<string, float[]>()), feeds, optimise: true);
        foreach (var (name, values) in expected)
        {
            Assert.Equal(values, actual[name]);

            // The quantization did something: the fake-quantized outputs are not the FP32 ones.
            Assert.NotEqual(fp32[name], values);
        }

        return proto;
    }

    private static byte[] RecurrentModel(string op, int gates, string direction)
    {
        var directions = direction == "bidirectional" ? 2 : 1;
        var rows = gates * Hidden;
        var builder = new GraphBuilder()
            .Input("x", -1, Steps, InputSize)
            .Initializer("w", [directions, rows, InputSize], GraphBuilder.RandomValues(11, directions * rows * InputSize, 0.6f))
            .Constant("r", [directions, rows, Hidden], GraphBuilder.RandomValues(12, directions * rows * Hidden, 0.6f))
            .Initializer("b", [directions, 2 * rows], GraphBuilder.RandomValues(13, directions * 2 * rows, 0.1f))
            .Node("Transpose", ["x"], ["xt"], "to_time_major", Ints("perm", 1, 0, 2));
        var attributes = new List<P.AttributeProto> { GraphBuilder.IntAttribute("hidden_size", Hidden), Strings("direction", direction) };
        if (op == "GRU")
        {
            attributes.Add(GraphBuilder.IntAttribute("linear_before_reset", 1));
        }

        // Y is [steps, directions, n, hidden]; batch-major output [n, steps, directions, hidden].
        return builder
            .Node(op, ["xt", "w", "r", "b"], ["yseq"], $"{op}_1", [.. attributes])
            .Node("Transpose", ["yseq"], ["y"], "to_batch_major", Ints("perm", 2, 0, 1, 3))
            .Output("y", -1, Steps, directions, Hidden)
            .ToBytes();
    }

    private static Dictionary<string, Func<OrtValue>> SequenceFeeds()
    {
        var x = GraphBuilder.RandomValues(3, Samples * Steps * InputSize, 1.5f);
        return new() { ["x"] = OrtRunner.Floats(x, Samples, Steps, InputSize) };
    }

    private static Dictionary<string, Func<OrtValue>> IdFeeds(int vocabulary, int perSample)
    {
        var ids = Enumerable.Range(0, Samples * perSample).Select(i => (long)(i * 7 % vocabulary)).ToArray();
        return new() { ["ids"] = () => OrtValue.CreateTensorValueFromMemory(ids, [Samples, perSample]) };
    }

    private static P.AttributeProto Ints(string name, params long[] values)
    {
        var attribute = new P.AttributeProto { Name = name, Type = P.AttributeProto.Types.AttributeType.Ints };
        attribute.Ints.AddRange(values);
        return attribute;
    }

    private static P.AttributeProto Strings(string name, string value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.String, S = Google.Protobuf.ByteString.CopyFromUtf8(value) };
}
