using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>Inference-mode BatchNormalization folded into the Conv before it, checked against ONNX Runtime running the unfolded graph.</summary>
public sealed class BatchNormFoldingTests
{
    private static readonly float[] Input = GraphBuilder.RandomValues(11, 1 * 3 * 6 * 6);

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void FoldedConvMatchesOrtOnTheUnfoldedGraph(bool convHasBias)
    {
        var bytes = ConvBatchNorm(convHasBias, secondReader: false);

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.True(layer.FollowedByBatchNorm);
        Assert.DoesNotContain(model.Proto.Graph.Node, n => n.OpType == "BatchNormalization");
        Assert.Contains("Folded BatchNormalization 'bn' into Conv 'conv'.", model.Notes);
        // The folded weight really differs from the upload (gamma / sqrt(var + eps) is not 1 here).
        Assert.NotEqual(Weight, model.GetWeight(layer));
        // Reference: ONNX Runtime (optimisations off) computing Conv then BatchNormalization as uploaded.
        var feeds = new Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> { ["x"] = OrtRunner.Floats(Input, 1, 3, 6, 6) };
        var expected = OrtRunner.Run(bytes, feeds)["y"];
        var actual = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), feeds)["y"];
        Assert.InRange(OrtRunner.MaxRelativeDifference(expected, actual), 0, 1e-5);
    }

    [Fact]
    public void BatchNormIsNotFoldedWhenTheConvOutputHasASecondReader()
    {
        var bytes = ConvBatchNorm(convHasBias: true, secondReader: true);

        var model = OnnxModel.Load(bytes, "m");

        var layer = Assert.Single(model.Layers);
        Assert.False(layer.FollowedByBatchNorm);
        Assert.Equal(Weight, model.GetWeight(layer));
        Assert.Contains(model.Proto.Graph.Node, n => n.OpType == "BatchNormalization");
        Assert.Contains(model.Notes, n => n.Contains("'bn' not folded", StringComparison.Ordinal));
        var feeds = new Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> { ["x"] = OrtRunner.Floats(Input, 1, 3, 6, 6) };
        var expected = OrtRunner.Run(bytes, feeds);
        var actual = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), feeds);
        Assert.Equal(expected["y"], actual["y"]);
        Assert.Equal(expected["r"], actual["r"]);
    }

    private static float[] Weight { get; } = GraphBuilder.RandomValues(12, 4 * 3 * 3 * 3);

    private static byte[] ConvBatchNorm(bool convHasBias, bool secondReader)
    {
        var gamma = new[] { 0.5f, 2f, -1.5f, 1.25f };
        var beta = new[] { 0.1f, -0.2f, 0.3f, 0f };
        var mean = new[] { 0.05f, -0.3f, 0.2f, 1f };
        var variance = new[] { 0.9f, 0.04f, 2.5f, 1.7f };
        var builder = new GraphBuilder().Opset(13)
            .Input("x", 1, 3, 6, 6)
            .Constant("w", [4, 3, 3, 3], Weight)
            .Constant("gamma", [4], gamma).Constant("beta", [4], beta).Constant("mean", [4], mean).Constant("var", [4], variance);
        if (convHasBias)
        {
            builder.Constant("b", [4], [0.3f, -0.1f, 0.7f, -0.4f]).Node("Conv", ["x", "w", "b"], ["c"], "conv");
        }
        else
        {
            builder.Node("Conv", ["x", "w"], ["c"], "conv");
        }

        builder.Node("BatchNormalization", ["c", "gamma", "beta", "mean", "var"], ["y"], "bn", GraphBuilder.FloatAttribute("epsilon", 1e-3f))
            .Output("y", 1, 4, 4, 4);
        if (secondReader)
        {
            builder.Node("Relu", ["c"], ["r"], "side").Output("r", 1, 4, 4, 4);
        }

        return builder.ToBytes();
    }
}
