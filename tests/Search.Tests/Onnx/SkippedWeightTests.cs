using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>Weights that stay FP32 are listed with their op, parameter count and reason; biases and small vectors are not.</summary>
public sealed class SkippedWeightTests
{
    [Fact]
    public void ActivationMatMulAndALargeConstantOfAnUnquantizedOpAreListedButBiasesAreNot()
    {
        var bytes = new GraphBuilder()
            .Input("x", -1, 32)
            .Initializer("w", [32, 48], GraphBuilder.RandomValues(1, 32 * 48))
            .Initializer("bias", [48], GraphBuilder.RandomValues(2, 48))
            .Constant("position", [32, 48], GraphBuilder.RandomValues(3, 32 * 48))
            .Initializer("scale", [1, 48], GraphBuilder.RandomValues(4, 48))
            .Node("Gemm", ["x", "w", "bias"], ["h"], "fc")
            .Node("Add", ["h", "position"], ["p"], "add_position")
            .Node("Mul", ["p", "scale"], ["q"], "rescale")
            .Node("Transpose", ["q"], ["qt"], "flip")
            .Node("MatMul", ["q", "qt"], ["gram"], "gram")
            .Output("gram", 32, 32)
            .ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        Assert.Equal(["fc"], model.Layers.Select(l => l.Name));
        Assert.Equal(
            [("add_position", "Add", "position", 32L * 48), ("gram", "MatMul", "qt", 0L)],
            model.Skipped.Select(s => (s.Node, s.Op, s.Input, s.Parameters)).Order());
        Assert.Contains("two activations", model.Skipped.Single(s => s.Op == "MatMul").Reason);
        Assert.Contains("Add has no quantized form", model.Skipped.Single(s => s.Op == "Add").Reason);
    }

    [Fact]
    public void GatherAlongAnotherAxisIsNotALayerAndIsListed()
    {
        var bytes = new GraphBuilder()
            .Input("x", -1, 8)
            .Initializer("w", [8, 4], GraphBuilder.RandomValues(1, 32))
            .Initializer("columns", [64, 40], GraphBuilder.RandomValues(2, 64 * 40))
            .Input("pick", P.TensorProto.Types.DataType.Int64, 3)
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Node("Gather", ["columns", "pick"], ["g"], "by_column", GraphBuilder.IntAttribute("axis", 1))
            .Output("y", -1, 4)
            .Output("g", 64, 3)
            .ToBytes();

        var model = OnnxModel.Load(bytes, "m");

        Assert.Equal(["fc"], model.Layers.Select(l => l.Name));
        var skipped = Assert.Single(model.Skipped);
        Assert.Equal(("by_column", "Gather", 64L * 40), (skipped.Node, skipped.Op, skipped.Parameters));
    }

    [Theory]
    [InlineData(OcrModels.ClassifierFile)]
    [InlineData(OcrModels.DetectorFile)]
    [InlineData(OcrModels.RecogniserFile)]
    public void OcrModelsListOnlyTheirActivationMatMulsAsSkipped(string file)
    {
        var model = OnnxModel.LoadFile(OcrModels.PathOf(file));

        // The recogniser's attention blocks multiply two activations 4 times (see OcrModelTests); nothing else
        // in the three models holds a sizeable FP32 constant outside a layer.
        var expected = file == OcrModels.RecogniserFile ? 4 : 0;
        Assert.Equal(expected, model.Skipped.Count);
        Assert.All(model.Skipped, s => Assert.Equal(("MatMul", 0L), (s.Op, s.Parameters)));
    }
}
