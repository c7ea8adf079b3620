using Bitbudget.Search.Onnx;
using Google.Protobuf;
using Bitbudget.Search.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

public sealed class GraphSlicerStackingTests
{
    [Fact]
    public void EachRowBlockOfAStackedRunIsWhatThePlainModelGivesWithThatCopysWeight()
    {
        // Reference: ONNX Runtime running the plain model (weights as constants) once per weight.
        var model = SmallModels.Mlp();
        var layer = model.Layers.Single(l => l.Name == "fc2");
        var slicer = new GraphSlicer(SmallModels.Parse(model.BuildWeightsAsInputs()));
        var stacked = slicer.StackedSuffix(0, [layer.WeightName], 3, ["x"], new Dictionary<string, (int, int)>(), _ => null, out var reason);
        Assert.NotNull(stacked);
        Assert.Equal(string.Empty, reason);

        const int samples = 5;
        var x = GraphBuilder.RandomValues(7, samples * 16);
        var fp32 = model.GetWeight(layer);
        var weights = new[] { fp32, fp32.Select(v => v * 0.5f).ToArray(), fp32.Select(v => -v).ToArray() };
        var feeds = new Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>>(StringComparer.Ordinal) { ["x"] = OrtRunner.Floats(x, samples, 16) };
        foreach (var other in model.Layers.Where(l => l != layer))
        {
            feeds[other.WeightName] = OrtRunner.Floats(model.GetWeight(other), [.. other.Shape]);
        }

        for (var j = 0; j < 3; j++)
        {
            feeds[GraphSlicer.WidthInput(layer.WeightName, j)] = OrtRunner.Floats(weights[j], [.. layer.Shape]);
        }

        var logits = OrtRunner.Run(stacked.ToByteArray(), feeds)["logits"];
        Assert.Equal(3 * samples * 10, logits.Length);
        for (var j = 0; j < 3; j++)
        {
            var plain = OrtRunner.Run(model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = weights[j] }), new Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> { ["x"] = OrtRunner.Floats(x, samples, 16) })["logits"];
            Assert.True(OrtRunner.MaxRelativeDifference(plain, logits.Skip(j * samples * 10).Take(samples * 10).ToArray()) <= 1e-6, $"copy {j}");
        }

        // The copies are different weights, so the blocks differ: a stacked graph that fed every copy the same weight fails above.
        Assert.NotEqual(logits.Take(samples * 10), logits.Skip(samples * 10).Take(samples * 10));
    }

    [Fact]
    public void OneCopyMakesTheUnperturbedWeightsConstantsAndAddsNoNode()
    {
        var model = SmallModels.Mlp();
        var slicer = new GraphSlicer(SmallModels.Parse(model.BuildWeightsAsInputs()));
        var constants = model.Layers.Where(l => l.Name != "fc3").ToDictionary(l => l.WeightName, l => GraphBuilder.FloatTensor(l.WeightName, [.. l.Shape], model.GetWeight(l)));

        var suffix = slicer.StackedSuffix(0, ["w3"], 1, ["x"], new Dictionary<string, (int, int)>(), n => constants.GetValueOrDefault(n), out _)!;

        Assert.Equal(["w3", "x"], suffix.Graph.Input.Select(i => i.Name).Order(StringComparer.Ordinal));
        Assert.Equal(constants.Keys.Order(), suffix.Graph.Initializer.Select(i => i.Name).Where(constants.ContainsKey).Order());
        Assert.Equal(SmallModels.Parse(model.BuildWeightsAsInputs()).Graph.Node.Select(n => n.OpType), suffix.Graph.Node.Select(n => n.OpType));
    }

    [Fact]
    public void AWeightReadOtherThanAsTheSecondInputOfALinearOpIsRefusedWithTheNode()
    {
        // y = W x with the samples on x's axis 1: splitting axis 0 would cut W's rows, not samples.
        var proto = new GraphBuilder()
            .Input("x", 4, -1)
            .Input("w", 3, 4)
            .Node("MatMul", ["w", "x"], ["y"], "left")
            .Output("y", 3, -1)
            .Build();

        var stacked = new GraphSlicer(proto).StackedSuffix(0, ["w"], 2, ["x"], new Dictionary<string, (int, int)>(), _ => null, out var reason);

        Assert.Null(stacked);
        Assert.Contains("node 'left' (MatMul)", reason, StringComparison.Ordinal);
    }
}
