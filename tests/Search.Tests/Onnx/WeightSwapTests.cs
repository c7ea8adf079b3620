using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>Weights fed as graph inputs or swapped as constants, checked with ONNX Runtime.</summary>
public sealed class WeightSwapTests
{
    private static readonly float[] X = GraphBuilder.RandomValues(31, 8);

    [Fact]
    public void IfModelWithWeightsAsInputsReproducesTheUpload()
    {
        var bytes = WeightLocationTests.IfModel();
        var model = OnnxModel.Load(bytes, "if");
        var layer = Assert.Single(model.Layers);

        var asInputs = P.ModelProto.Parser.ParseFrom(model.BuildWeightsAsInputs());

        var input = Assert.Single(asInputs.Graph.Input, i => i.Name == layer.WeightName);
        Assert.Equal((int)P.TensorProto.Types.DataType.Float, input.Type.TensorType.ElemType);
        Assert.Equal(layer.Shape, input.Type.TensorType.Shape.Dim.Select(d => d.DimValue));
        Assert.DoesNotContain(asInputs.Graph.Initializer, t => t.Name == layer.WeightName);
        var expected = OrtRunner.Run(bytes, Feeds(cond: true))["y"];
        var feeds = Feeds(cond: true);
        feeds[layer.WeightName] = OrtRunner.Floats(model.GetWeight(layer), layer.Shape.ToArray());
        Assert.Equal(expected, OrtRunner.Run(model.BuildWeightsAsInputs(), feeds)["y"]);
    }

    [Fact]
    public void ZeroedWeightsZeroTheBranchOutput()
    {
        var model = OnnxModel.Load(WeightLocationTests.IfModel(), "if");
        var layer = Assert.Single(model.Layers);

        var zeroed = model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = new float[layer.ParameterCount] });

        var before = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), Feeds(cond: true))["y"];
        var after = OrtRunner.Run(zeroed, Feeds(cond: true))["y"];
        Assert.Contains(before, v => v != 0);
        Assert.All(after, v => Assert.Equal(0f, v));
        Assert.Equal(X, OrtRunner.Run(zeroed, Feeds(cond: false))["y"]);
    }

    [Fact]
    public void ReplacementOfTheWrongLengthIsRejected()
    {
        var model = OnnxModel.Load(WeightLocationTests.IfModel(), "if");
        var layer = Assert.Single(model.Layers);

        Assert.Throws<ArgumentException>(() => model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = new float[3] }));
        Assert.Throws<ArgumentException>(() => model.BuildWithWeights(new Dictionary<string, float[]> { ["nope"] = new float[16] }));
    }

    private static Dictionary<string, Func<OrtValue>> Feeds(bool cond) =>
        new() { ["x"] = OrtRunner.Floats(X, 2, 4), ["cond"] = OrtRunner.Bool(cond) };
}
