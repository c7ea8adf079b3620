using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// One small graph per operator whose signature or meaning changed between opsets (ONNX operator
/// changelog, https://github.com/onnx/onnx/blob/main/docs/Changelog.md). Reference: ONNX Runtime running
/// the graph at its old opset; the raised graph must give the same outputs on the same inputs. ONNX
/// Runtime also refuses to load a node that still has an attribute its new version dropped, so a
/// missing rewrite fails the run, not just the comparison.
/// </summary>
public sealed class OpsetRaiserTests
{
    private static readonly float[] X = GraphBuilder.RandomValues(11, 2 * 3 * 4 * 6, 3f);

    [Theory]
    [InlineData(13)]
    [InlineData(22)]
    public void ClipAttributesBecomeInputs(long target)
    {
        var model = Single(9, "Clip", [2, 3, 4, 6], [2, 3, 4, 6], Floats("min", 0f), Floats("max", 1.5f));

        var raised = AssertSameOutputs(model, target, Feed(X, 2, 3, 4, 6));

        var clip = raised.Graph.Node.Single(n => n.OpType == "Clip");
        Assert.Empty(clip.Attribute);
        Assert.Equal(3, clip.Input.Count);
    }

    [Fact]
    public void ClipWithOnlyAMinimumLeavesTheMaximumOut()
    {
        var model = Single(9, "Clip", [2, 3, 4, 6], [2, 3, 4, 6], Floats("min", -0.5f));

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Equal(2, raised.Graph.Node.Single(n => n.OpType == "Clip").Input.Count);
    }

    [Fact]
    public void SliceAttributesBecomeInputs()
    {
        var model = Single(9, "Slice", [2, 3, 4, 6], [2, 2, 4, 3], Ints("starts", 1, 1), Ints("ends", 3, long.MaxValue), Ints("axes", 1, 3));

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Equal(4, raised.Graph.Node.Single(n => n.OpType == "Slice").Input.Count);
    }

    [Fact]
    public void TopKCountBecomesAnInput()
    {
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6)
            .Node("TopK", ["x"], ["values", "indices"], "topk", GraphBuilder.IntAttribute("k", 3), GraphBuilder.IntAttribute("axis", 3))
            .Output("values", 2, 3, 4, 3).Build();

        AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));
    }

    [Theory]
    [InlineData("constant", 1.5f)]
    [InlineData("reflect", 0f)]
    [InlineData("edge", 0f)]
    public void PadAttributesBecomeInputs(string mode, float value)
    {
        var model = Single(9, "Pad", [2, 3, 4, 6], [2, 3, 7, 8], Ints("pads", 0, 0, 1, 1, 0, 0, 2, 1), Text("mode", mode), Floats("value", value));

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Equal(value != 0 ? 3 : 2, raised.Graph.Node.Single(n => n.OpType == "Pad").Input.Count);
    }

    [Theory]
    [InlineData("nearest", 10)]
    [InlineData("nearest", 13)]
    [InlineData("nearest", 22)]
    [InlineData("linear", 11)]
    [InlineData("linear", 13)]
    public void UpsampleBecomesResizeWithTheOldCoordinates(string mode, long target)
    {
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6)
            .Initializer("scales", [4], [1f, 1f, 2f, 3f])
            .Node("Upsample", ["x", "scales"], ["y"], "up", Text("mode", mode))
            .Output("y", 2, 3, 8, 18).Build();

        var raised = AssertSameOutputs(model, target, Feed(X, 2, 3, 4, 6));

        Assert.Equal("Resize", raised.Graph.Node.Single(n => n.Name == "up").OpType);
    }

    [Fact]
    public void ShrinkingNearestResizeOfOpset10KeepsItsCeilingRounding()
    {
        var x = GraphBuilder.RandomValues(5, 2 * 3 * 8 * 9);
        var model = new GraphBuilder().Opset(10).Input("x", 2, 3, 8, 9)
            .Initializer("scales", [4], [1f, 1f, 0.5f, 0.4f])
            .Node("Resize", ["x", "scales"], ["y"], "down", Text("mode", "nearest"))
            .Output("y", 2, 3, 4, 3).Build();

        var raised = AssertSameOutputs(model, 13, Feed(x, 2, 3, 8, 9));

        Assert.Equal("ceil", raised.Graph.Node.Single(n => n.Name == "down").Attribute.Single(a => a.Name == "nearest_mode").S.ToStringUtf8());
    }

    [Theory]
    [InlineData("Softmax", 1L)]
    [InlineData("Softmax", 2L)]
    [InlineData("Softmax", null)]
    [InlineData("LogSoftmax", 1L)]
    [InlineData("Hardmax", 2L)]
    public void CoercedSoftmaxKeepsNormalisingOverTheFlattenedTail(string op, long? axis)
    {
        // At opset 9 Softmax(axis=1) on [2,3,4,6] normalises over 3*4*6 values per sample; Softmax-13 would
        // normalise over axis 1 alone (3 values), which the raise must not silently adopt.
        var attributes = axis is { } a ? new[] { GraphBuilder.IntAttribute("axis", a) } : [];
        var model = new GraphBuilder().Opset(9).Input("x", -1, 3, 4, 6)
            .Node("Relu", ["x"], ["r"], "relu")
            .Node(op, ["r"], ["y"], "norm", attributes)
            .Output("y", 2, 3, 4, 6).Build();

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Contains(raised.Graph.Node, n => n.OpType == "Flatten");
    }

    [Fact]
    public void SoftmaxOverTheDeclaredLastAxisStaysOneNode()
    {
        var model = Single(9, "Softmax", [2, 3, 4, 6], [2, 3, 4, 6], GraphBuilder.IntAttribute("axis", 3));

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Single(raised.Graph.Node);
    }

    [Fact]
    public void SqueezeAndUnsqueezeAxesBecomeInputs()
    {
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6)
            .Node("Unsqueeze", ["x"], ["u"], "unsqueeze", Ints("axes", 0, 3))
            .Node("Squeeze", ["u"], ["y"], "squeeze", Ints("axes", 0))
            .Output("y", 2, 3, 4, 1, 6).Build();

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.All(raised.Graph.Node.Where(n => n.OpType is "Squeeze" or "Unsqueeze"), n => Assert.Equal(2, n.Input.Count));
    }

    [Theory]
    [InlineData("ReduceSum", 9, 13)]
    [InlineData("ReduceSum", 9, 21)]
    [InlineData("ReduceMean", 9, 18)]
    [InlineData("ReduceMean", 13, 22)]
    [InlineData("ReduceMax", 11, 18)]
    [InlineData("ReduceMin", 11, 18)]
    [InlineData("ReduceProd", 11, 18)]
    [InlineData("ReduceL1", 11, 18)]
    [InlineData("ReduceL2", 11, 18)]
    [InlineData("ReduceLogSum", 11, 18)]
    [InlineData("ReduceLogSumExp", 11, 18)]
    [InlineData("ReduceSumSquare", 11, 18)]
    public void ReduceAxesBecomeAnInput(string op, long source, long target)
    {
        var positive = X.Select(v => Math.Abs(v) + 0.1f).ToArray();
        var model = Single(source, op, [2, 3, 4, 6], [2, 4], Ints("axes", 1, -1), GraphBuilder.IntAttribute("keepdims", 0));

        var raised = AssertSameOutputs(model, target, Feed(positive, 2, 3, 4, 6));

        Assert.Equal(2, raised.Graph.Node.Single(n => n.OpType == op).Input.Count);
    }

    [Fact]
    public void ReduceWithoutAxesStillReducesEverything()
    {
        var model = Single(9, "ReduceMean", [2, 3, 4, 6], [1, 1, 1, 1]);

        AssertSameOutputs(model, 18, Feed(X, 2, 3, 4, 6));
    }

    [Theory]
    [InlineData(9, 13)]
    [InlineData(9, 18)]
    [InlineData(11, 22)]
    public void SplitSizesBecomeAnInput(long source, long target)
    {
        var model = new GraphBuilder().Opset(source).Input("x", 2, 3, 4, 6)
            .Node("Split", ["x"], ["a", "b"], "split", GraphBuilder.IntAttribute("axis", 3), Ints("split", 2, 4))
            .Output("a", 2, 3, 4, 2).Output("b", 2, 3, 4, 4).Build();

        AssertSameOutputs(model, target, Feed(X, 2, 3, 4, 6));
    }

    [Fact]
    public void EqualSplitGetsItsOutputCountAtOpset18()
    {
        var model = new GraphBuilder().Opset(11).Input("x", 2, 3, 4, 6)
            .Node("Split", ["x"], ["a", "b", "c"], "split", GraphBuilder.IntAttribute("axis", 3))
            .Output("a", 2, 3, 4, 2).Output("b", 2, 3, 4, 2).Output("c", 2, 3, 4, 2).Build();

        var raised = AssertSameOutputs(model, 18, Feed(X, 2, 3, 4, 6));

        Assert.Equal(3, raised.Graph.Node.Single().Attribute.Single(a => a.Name == "num_outputs").I);
    }

    [Fact]
    public void DropoutRatioBecomesAnInput()
    {
        var model = Single(9, "Dropout", [2, 3, 4, 6], [2, 3, 4, 6], Floats("ratio", 0.3f));

        var raised = AssertSameOutputs(model, 13, Feed(X, 2, 3, 4, 6));

        Assert.Equal(2, raised.Graph.Node.Single(n => n.OpType == "Dropout").Input.Count);
    }

    [Fact]
    public void ScatterBecomesScatterElements()
    {
        var indices = new P.TensorProto { Name = "indices", DataType = (int)P.TensorProto.Types.DataType.Int64, Dims = { 2, 2 }, Int64Data = { 0, 2, 1, 0 } };
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3).Input("updates", 2, 2)
            .Initializer(indices)
            .Node("Scatter", ["x", "indices", "updates"], ["y"], "scatter", GraphBuilder.IntAttribute("axis", 1))
            .Output("y", 2, 3).Build();

        var raised = AssertSameOutputs(model, 13, new() { ["x"] = OrtRunner.Floats(X[..6], 2, 3), ["updates"] = OrtRunner.Floats([9f, 8f, 7f, 6f], 2, 2) });

        Assert.Equal("ScatterElements", raised.Graph.Node.Single().OpType);
    }

    [Fact]
    public void BatchNormalizationAndConvKeepTheirNodes()
    {
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6)
            .Initializer("w", [5, 3, 3, 3], GraphBuilder.RandomValues(1, 135))
            .Initializer("scale", [5], [1f, 0.5f, 2f, 1.5f, 0.8f]).Initializer("bias", [5], [0f, 0.1f, -0.2f, 0.3f, 0f])
            .Initializer("mean", [5], [0.1f, 0f, 0.2f, -0.1f, 0f]).Initializer("var", [5], [1f, 2f, 0.5f, 1f, 1.5f])
            .Node("Conv", ["x", "w"], ["c"], "conv", Ints("pads", 1, 1, 1, 1))
            .Node("BatchNormalization", ["c", "scale", "bias", "mean", "var"], ["y"], "bn", Floats("epsilon", 1e-5f), Floats("momentum", 0.9f))
            .Output("y", 2, 5, 4, 6).Build();

        var raised = AssertSameOutputs(model, 15, Feed(X, 2, 3, 4, 6));

        Assert.Equal(model.Graph.Node, raised.Graph.Node);
    }

    [Fact]
    public void NodesInsideIfBranchesAreRaisedToo()
    {
        var thenBranch = new GraphBuilder().Node("Clip", ["x"], ["t"], "inner_clip", Floats("min", 0f), Floats("max", 1f)).Output("t", 2, 3, 4, 6).BuildGraph();
        var elseBranch = new GraphBuilder().Node("Unsqueeze", ["x"], ["u"], "inner_unsqueeze", Ints("axes", 0))
            .Node("Squeeze", ["u"], ["e"], "inner_squeeze", Ints("axes", 0)).Output("e", 2, 3, 4, 6).BuildGraph();
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6).Input("flag", P.TensorProto.Types.DataType.Bool)
            .Node("If", ["flag"], ["y"], "branch", GraphBuilder.GraphAttribute("then_branch", thenBranch), GraphBuilder.GraphAttribute("else_branch", elseBranch))
            .Output("y", 2, 3, 4, 6).Build();

        foreach (var flag in new[] { true, false })
        {
            var raised = AssertSameOutputs(model, 13, new() { ["x"] = OrtRunner.Floats(X, 2, 3, 4, 6), ["flag"] = OrtRunner.Bool(flag) });
            var inner = raised.Graph.Node.Single().Attribute.Single(a => a.Name == "then_branch").G.Node.Single(n => n.OpType == "Clip");
            Assert.Equal(3, inner.Input.Count);
        }
    }

    [Fact]
    public void NodesInsideLoopBodiesAreRaisedToo()
    {
        // Two iterations of x <- Clip(x * 2, -1, 1): a loop-carried value through a body with an opset-9 Clip.
        var two = GraphBuilder.FloatTensor("two", [], [2f]);
        var body = new GraphBuilder()
            .Input("i", P.TensorProto.Types.DataType.Int64).Input("cond_in", P.TensorProto.Types.DataType.Bool).Input("x_in", 2, 3, 4, 6)
            .Initializer(two)
            .Node("Identity", ["cond_in"], ["cond_out"], "keep_going")
            .Node("Mul", ["x_in", "two"], ["doubled"], "double")
            .Node("Clip", ["doubled"], ["x_out"], "body_clip", Floats("min", -1f), Floats("max", 1f))
            .Output("cond_out", P.TensorProto.Types.DataType.Bool).Output("x_out", 2, 3, 4, 6).BuildGraph();
        var trips = new P.TensorProto { Name = "trips", DataType = (int)P.TensorProto.Types.DataType.Int64, Int64Data = { 2 } };
        var model = new GraphBuilder().Opset(9).Input("x", 2, 3, 4, 6).Input("go", P.TensorProto.Types.DataType.Bool)
            .Initializer(trips)
            .Node("Loop", ["trips", "go", "x"], ["y"], "loop", GraphBuilder.GraphAttribute("body", body))
            .Output("y", 2, 3, 4, 6).Build();

        var raised = AssertSameOutputs(model, 13, new() { ["x"] = OrtRunner.Floats(X, 2, 3, 4, 6), ["go"] = OrtRunner.Bool(true) });

        var inner = raised.Graph.Node.Single().Attribute.Single().G.Node.Single(n => n.OpType == "Clip");
        Assert.Equal(3, inner.Input.Count);
    }

    [Fact]
    public void RaiseSetsTheOpsetAndTheIrVersionItCameWith()
    {
        var model = Single(9, "Relu", [2, 3], [2, 3]);

        var raise = OpsetRaiser.Raise(model, 21);

        Assert.Equal((9L, 21L), (raise.FromOpset, raise.ToOpset));
        Assert.Equal(21, model.OpsetImport.Single().Version);
        Assert.Equal(10, model.IrVersion);
        Assert.Empty(raise.Rewritten);
    }

    [Fact]
    public void LowerTargetIsRefused()
    {
        var model = Single(13, "Relu", [2, 3], [2, 3]);

        var error = Assert.Throws<EngineException>(() => OpsetRaiser.Raise(model, 11));

        Assert.Equal("opset-raise-lower", error.Code);
        Assert.Contains("below the model's opset 13", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void TargetBeyondTheNewestCoveredOpsetIsRefused()
    {
        var error = Assert.Throws<EngineException>(() => OpsetRaiser.Raise(Single(13, "Relu", [2, 3], [2, 3]), 40));

        Assert.Equal("opset-raise-target-unsupported", error.Code);
    }

    [Fact]
    public void SourceOlderThanOpset9IsRefused()
    {
        var error = Assert.Throws<EngineException>(() => OpsetRaiser.Raise(Single(8, "Relu", [2, 3], [2, 3]), 13));

        Assert.Equal("opset-raise-source-unsupported", error.Code);
    }

    [Theory]
    // ImageScaler: an experimental operator of opset 1 that later opsets dropped; the raise knows no rule for it.
    [InlineData("ImageScaler", 9, 13, "ImageScaler node 'odd'")]
    [InlineData("GroupNormalization", 18, 21, "per group to one per channel")]
    public void OperatorWithoutAConversionIsRefusedByName(string op, long source, long target, string expected)
    {
        var model = Single(source, op, [2, 3, 4, 6], [2, 3, 4, 6]);
        model.Graph.Node[0].Name = "odd";

        var error = Assert.Throws<EngineException>(() => OpsetRaiser.Raise(model, target));

        Assert.Equal("opset-raise-unsupported", error.Code);
        Assert.Contains(expected, error.Message, StringComparison.Ordinal);
        Assert.Contains($"'odd'", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void NearestResizeWithScalesComputedAtRunTimeIsRefused()
    {
        var model = new GraphBuilder().Opset(10).Input("x", 2, 3, 4, 6).Input("scales", 4)
            .Node("Resize", ["x", "scales"], ["y"], "resize", Text("mode", "nearest"))
            .Output("y", 2, 3, 8, 12).Build();

        var error = Assert.Throws<EngineException>(() => OpsetRaiser.Raise(model, 13));

        Assert.Equal("opset-raise-unsupported", error.Code);
        Assert.Contains("scales are computed at run time", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void CheckRefusesARaiseThatChangesAnOutput()
    {
        // The naive raise: Softmax(axis=1) kept as is at opset 13, where it normalises over 3 values instead of 72.
        var original = new GraphBuilder().Opset(9).Input("x", -1, 3, 4, 6).Node("Softmax", ["x"], ["y"], "norm", GraphBuilder.IntAttribute("axis", 1)).Output("y", -1, 3, 4, 6).Build();
        var naive = original.Clone();
        naive.OpsetImport[0].Version = 13;
        var inputs = new[] { new ValueDescription("x", ElementType.Float32, [null, 3, 4, 6]) };
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [2, 3, 4, 6], X)], inputs);

        var error = Assert.Throws<EngineException>(() =>
            OpsetRaiseCheck.Verify(new OpsetRaise(9, 13, []), new RaisedGraphs(original.ToByteArray(), naive.ToByteArray()), inputs, data, maxBatch: 1));

        Assert.Equal("opset-raise-mismatch", error.Code);
        Assert.Contains("output 'y'", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void LoadWithATargetRaisesBeforeFindingLayers()
    {
        var bytes = new GraphBuilder().Opset(9).Input("x", -1, 4)
            .Initializer("w", [4, 3], GraphBuilder.RandomValues(2, 12))
            .Node("MatMul", ["x", "w"], ["m"], "fc")
            .Node("Clip", ["m"], ["c"], "clip", Floats("min", 0f), Floats("max", 6f))
            .Node("Softmax", ["c"], ["y"], "softmax")
            .Output("y", -1, 3).ToBytes();

        var model = OnnxModel.Load(bytes, "mlp", targetOpset: 13);
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [5, 4], GraphBuilder.RandomValues(3, 20, 4f))], model.Inputs);
        var comparison = OpsetRaiseCheck.Verify(model, data);

        Assert.Equal((13L, 9L), (model.Opset, model.OriginalOpset));
        Assert.Equal("fc", model.Layers.Single().Name);
        Assert.Equal(3, model.Proto.Graph.Node.Single(n => n.OpType == "Clip").Input.Count);
        Assert.NotNull(comparison);
        Assert.True(comparison.BitExact);
    }

    /// <summary>Runs the model at its opset and raised to <paramref name="target"/> in ONNX Runtime; every output must be bit for bit equal.</summary>
    private static P.ModelProto AssertSameOutputs(P.ModelProto model, long target, Dictionary<string, Func<OrtValue>> feeds)
    {
        var raised = model.Clone();
        OpsetRaiser.Raise(raised, target);

        var expected = OrtRunner.Run(model.ToByteArray(), feeds);
        var actual = OrtRunner.Run(raised.ToByteArray(), feeds);

        Assert.Equal(target, raised.OpsetImport.Single().Version);
        Assert.Equal(expected.Keys, actual.Keys);
        foreach (var (name, values) in expected)
        {
            Assert.Equal(values, actual[name]);
        }

        return raised;
    }

    private static P.ModelProto Single(long opset, string op, long[] inShape, long[] outShape, params P.AttributeProto[] attributes) =>
        new GraphBuilder().Opset(opset).Input("x", inShape).Node(op, ["x"], ["y"], op.ToLowerInvariant(), attributes).Output("y", outShape).Build();

    private static Dictionary<string, Func<OrtValue>> Feed(float[] values, params long[] shape) => new() { ["x"] = OrtRunner.Floats(values, shape) };

    private static P.AttributeProto Ints(string name, params long[] values) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Ints, Ints = { values } };

    private static P.AttributeProto Floats(string name, float value) => GraphBuilder.FloatAttribute(name, value);

    private static P.AttributeProto Text(string name, string value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.String, S = ByteString.CopyFromUtf8(value) };
}
