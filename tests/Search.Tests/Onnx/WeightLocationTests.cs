using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>Each place an exporter may keep a weight is found as exactly one FP32 initializer of the main graph.</summary>
public sealed class WeightLocationTests
{
    private static readonly float[] X = GraphBuilder.RandomValues(1, 8);
    private static readonly float[] W = GraphBuilder.RandomValues(2, 12);

    [Fact]
    public void InitializerWeightIsOneLayerWithItsOwnName()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Initializer("w", [4, 3], W)
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", 2, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("fc", "MatMul", "w", 12L, 1, false), (layer.Name, layer.Op, layer.WeightName, layer.ParameterCount, layer.ChannelAxis, layer.FollowedByBatchNorm));
        Assert.Equal([4L, 3L], layer.Shape);
        Assert.Equal(["fc"], layer.Consumers);
        Assert.Equal(W, model.GetWeight(layer));
        AssertSameOutputs(bytes, model, Feeds());
    }

    [Fact]
    public void ConstantNodeWeightBecomesAnInitializer()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Constant("w", [4, 3], W)
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", 2, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal("w", layer.WeightName);
        Assert.Equal(W, model.GetWeight(layer));
        Assert.DoesNotContain(model.Proto.Graph.Node, n => n.OpType == "Constant");
        Assert.Contains(model.Proto.Graph.Initializer, t => t.Name == "w" && t.DataType == (int)P.TensorProto.Types.DataType.Float);
        AssertSameOutputs(bytes, model, Feeds());
    }

    [Fact]
    public void WeightBehindIdentityIsResolvedAndTheIdentityDropped()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Constant("w_raw", [4, 3], W)
            .Node("Identity", ["w_raw"], ["w"], "id")
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", 2, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal("w", layer.WeightName);
        Assert.Equal(W, model.GetWeight(layer));
        Assert.Equal(["MatMul"], model.Proto.Graph.Node.Select(n => n.OpType));
        AssertSameOutputs(bytes, model, Feeds());
    }

    [Fact]
    public void Fp16WeightBehindCastIsStoredAsFp32()
    {
        var weight = GraphBuilder.RandomValues(3, 2 * 1 * 3 * 3);
        var bytes = new GraphBuilder()
            .Input("x", 1, 1, 5, 5)
            .Constant("w16", GraphBuilder.HalfTensor("w16", [2, 1, 3, 3], weight))
            .Node("Cast", ["w16"], ["w"], "cast", GraphBuilder.IntAttribute("to", (long)P.TensorProto.Types.DataType.Float))
            .Node("Conv", ["x", "w"], ["y"], "conv")
            .Output("y", 1, 2, 3, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("Conv", "w", 0), (layer.Op, layer.WeightName, layer.ChannelAxis));
        Assert.Equal(weight.Select(v => (float)(Half)v), model.GetWeight(layer));
        Assert.Equal(["Conv"], model.Proto.Graph.Node.Select(n => n.OpType));
        Assert.Equal((int)P.TensorProto.Types.DataType.Float, Assert.Single(model.Proto.Graph.Initializer).DataType);
        AssertSameOutputs(bytes, model, new() { ["x"] = OrtRunner.Floats(GraphBuilder.RandomValues(4, 25), 1, 1, 5, 5) });
    }

    [Fact]
    public void WeightInsideIfBranchMovesToTheMainGraph()
    {
        var bytes = IfModel();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal("choose/then_branch/fc", layer.Name);
        Assert.Equal("w_then", layer.WeightName);
        Assert.Equal(W.Concat(W).Take(16), model.GetWeight(layer));
        var thenBranch = model.Proto.Graph.Node.Single(n => n.OpType == "If").Attribute.Single(a => a.Name == "then_branch").G;
        Assert.Empty(thenBranch.Initializer);
        Assert.DoesNotContain(thenBranch.Node, n => n.OpType == "Constant");
        Assert.Contains(model.Proto.Graph.Initializer, t => t.Name == "w_then");
        // ONNX Runtime accepts the subgraph reading the hoisted weight from the outer scope.
        foreach (var cond in new[] { true, false })
        {
            AssertSameOutputs(bytes, model, new() { ["x"] = OrtRunner.Floats(X, 2, 4), ["cond"] = OrtRunner.Bool(cond) });
        }
    }

    [Fact]
    public void WeightInsideLoopBodyMovesToTheMainGraph()
    {
        var body = new GraphBuilder()
            .Input("i", P.TensorProto.Types.DataType.Int64)
            .Input("cond_in", P.TensorProto.Types.DataType.Bool)
            .Input("v_in", 2, 4)
            .Constant("w_body", [4, 4], GraphBuilder.RandomValues(5, 16, 0.5f))
            .Node("Identity", ["cond_in"], ["cond_out"], "keep")
            .Node("MatMul", ["v_in", "w_body"], ["v_out"], "step")
            .Output("cond_out", P.TensorProto.Types.DataType.Bool)
            .Output("v_out", 2, 4)
            .BuildGraph();
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Input("trips", P.TensorProto.Types.DataType.Int64).Input("go", P.TensorProto.Types.DataType.Bool)
            .Node("Loop", ["trips", "go", "x"], ["y"], "repeat", GraphBuilder.GraphAttribute("body", body))
            .Output("y", 2, 4).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("repeat/body/step", "w_body", 1), (layer.Name, layer.WeightName, layer.ChannelAxis));
        Assert.Contains(model.Proto.Graph.Initializer, t => t.Name == "w_body");
        AssertSameOutputs(bytes, model, new()
        {
            ["x"] = OrtRunner.Floats(X, 2, 4), ["trips"] = OrtRunner.Int64(3), ["go"] = OrtRunner.Bool(true),
        });
    }

    [Fact]
    public void WeightInsideScanBodyMovesToTheMainGraph()
    {
        var body = new GraphBuilder()
            .Input("s_in", 4).Input("x_t", 4)
            .Initializer("w_scan", [4, 4], GraphBuilder.RandomValues(13, 16))
            .Node("MatMul", ["x_t", "w_scan"], ["y_t"], "project")
            .Node("Add", ["s_in", "y_t"], ["s_out"], "accumulate")
            .Output("s_out", 4).Output("y_t", 4)
            .BuildGraph();
        var bytes = new GraphBuilder().Opset(11)
            .Input("s0", 4).Input("xs", 2, 4)
            .Node("Scan", ["s0", "xs"], ["s_final", "ys"], "sweep",
                GraphBuilder.GraphAttribute("body", body), GraphBuilder.IntAttribute("num_scan_inputs", 1))
            .Output("s_final", 4).Output("ys", 2, 4).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("sweep/body/project", "w_scan"), (layer.Name, layer.WeightName));
        Assert.Empty(model.Proto.Graph.Node.Single().Attribute.Single(a => a.Name == "body").G.Initializer);
        AssertSameOutputs(bytes, model, new() { ["s0"] = OrtRunner.Floats(X[..4], 4), ["xs"] = OrtRunner.Floats(X, 2, 4) });
    }

    [Fact]
    public void TiedWeightIsOneLayerWithTwoConsumers()
    {
        var square = GraphBuilder.RandomValues(6, 16);
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Initializer("w", [4, 4], square)
            .Node("MatMul", ["x", "w"], ["h"], "first")
            .Node("Identity", ["w"], ["w_again"], "alias")
            .Node("MatMul", ["h", "w_again"], ["y"], "second")
            .Output("y", 2, 4).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal(("first", "w"), (layer.Name, layer.WeightName));
        Assert.Equal(["first", "second"], layer.Consumers);
        Assert.All(model.Proto.Graph.Node, n => Assert.Equal("w", n.Input[1]));
        Assert.Single(model.Proto.Graph.Initializer);
        AssertSameOutputs(bytes, model, Feeds());
    }

    [Fact]
    public void MatMulOfTwoActivationsIsSkippedWithANote()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Initializer("wq", [4, 4], GraphBuilder.RandomValues(7, 16))
            .Node("MatMul", ["x", "wq"], ["q"], "query")
            .Node("Transpose", ["x"], ["xt"], "flip")
            .Node("MatMul", ["q", "xt"], ["scores"], "attn_qk")
            .Output("scores", 2, 2).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        Assert.Equal(["query"], model.Layers.Select(l => l.Name));
        Assert.Contains("MatMul 'attn_qk' multiplies two activations; not a weight layer.", model.Notes);
    }

    [Theory]
    [InlineData(0, new long[] { 4, 3 }, 1)]
    [InlineData(1, new long[] { 3, 4 }, 0)]
    public void GemmChannelAxisFollowsTransB(long transB, long[] shape, int axis)
    {
        // Gemm computes A * B' with B' = transB ? B^T : B, so the N outputs sit on axis 1 of [K,N] or axis 0 of [N,K] (ONNX Gemm docs).
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Initializer("b", shape, W)
            .Node("Gemm", ["x", "b"], ["y"], "dense", GraphBuilder.IntAttribute("transB", transB))
            .Output("y", 2, 3).ToBytes();

        var layer = Assert.Single(OnnxModel.Load(bytes, "m").Layers);

        Assert.Equal(axis, layer.ChannelAxis);
        Assert.Equal(3, layer.Channels);
    }

    [Fact]
    public void ConvTransposeChannelAxisIsOne()
    {
        // ConvTranspose W is [C_in, C_out/group, k...] (ONNX ConvTranspose docs), so output channels are axis 1.
        var bytes = new GraphBuilder()
            .Input("x", 1, 2, 3, 3).Initializer("w", [2, 5, 2, 2], GraphBuilder.RandomValues(8, 40))
            .Node("ConvTranspose", ["x", "w"], ["y"], "up")
            .Output("y", 1, 5, 4, 4).ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.Equal((1, 5L, 40L), (layer.ChannelAxis, layer.Channels, layer.ParameterCount));
        AssertSameOutputs(bytes, model, new() { ["x"] = OrtRunner.Floats(GraphBuilder.RandomValues(9, 18), 1, 2, 3, 3) });
    }

    [Fact]
    public void BatchedMatMulWeightUsesItsLastAxis()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 3, 4).Initializer("w", [2, 4, 5], GraphBuilder.RandomValues(10, 40))
            .Node("MatMul", ["x", "w"], ["y"], "batched")
            .Output("y", 2, 3, 5).ToBytes();

        var layer = Assert.Single(OnnxModel.Load(bytes, "m").Layers);

        Assert.Equal((2, 5L), (layer.ChannelAxis, layer.Channels));
    }

    [Fact]
    public void UnnamedNodesGetStableGeneratedNames()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Constant("w", [4, 3], W)
            .Node("MatMul", ["x", "w"], ["y"])
            .Output("y", 2, 3).ToBytes();

        var first = OnnxModel.Load(bytes, "m");
        var second = OnnxModel.Load(bytes, "m");

        Assert.Equal("MatMul_1", Assert.Single(first.Layers).Name);
        Assert.Equal(first.Layers, second.Layers, (a, b) => a.Name == b.Name && a.WeightName == b.WeightName);
        Assert.All(first.Proto.Graph.Node, n => Assert.NotEmpty(n.Name));
    }

    [Fact]
    public void ModelFactsComeFromTheUpload()
    {
        var bytes = new GraphBuilder().Opset(17)
            .Input("x", -1, 4).Initializer("w", [4, 3], W)
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", -1, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "tiny");

        Assert.Equal(("tiny", 17L, 8L), (model.Name, model.Opset, model.IrVersion));
        Assert.Equal(Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(bytes)), model.Sha256);
        var input = Assert.Single(model.Inputs);
        Assert.Equal(("x", ElementType.Float32), (input.Name, input.ElementType));
        Assert.Equal([null, 4L], input.Shape);
        Assert.Equal("y", Assert.Single(model.Outputs).Name);
    }

    /// <summary>An If whose then-branch multiplies by a Constant weight and whose else-branch passes x through.</summary>
    internal static byte[] IfModel()
    {
        var thenBranch = new GraphBuilder()
            .Constant("w_then", [4, 4], W.Concat(W).Take(16).ToArray())
            .Node("MatMul", ["x", "w_then"], ["then_out"], "fc")
            .Output("then_out", 2, 4)
            .BuildGraph();
        var elseBranch = new GraphBuilder()
            .Node("Identity", ["x"], ["else_out"], "pass")
            .Output("else_out", 2, 4)
            .BuildGraph();
        return new GraphBuilder()
            .Input("x", 2, 4).Input("cond", P.TensorProto.Types.DataType.Bool)
            .Node("If", ["cond"], ["y"], "choose",
                GraphBuilder.GraphAttribute("then_branch", thenBranch),
                GraphBuilder.GraphAttribute("else_branch", elseBranch))
            .Output("y", 2, 4).ToBytes();
    }

    private static Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> Feeds() => new() { ["x"] = OrtRunner.Floats(X, 2, 4) };

    /// <summary>ONNX Runtime gives the same outputs for the upload and for the normalised model.</summary>
    private static void AssertSameOutputs(byte[] original, OnnxModel model, Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> feeds)
    {
        var expected = OrtRunner.Run(original, feeds);
        var actual = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), feeds);
        foreach (var (name, values) in expected)
        {
            Assert.True(OrtRunner.MaxRelativeDifference(values, actual[name]) < 1e-6, $"output '{name}' changed");
        }
    }
}
