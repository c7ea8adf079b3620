using System.Text;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>Every input the engine cannot work with is refused with its own code and a readable sentence.</summary>
public sealed class RefusalTests
{
    private static readonly float[] W = GraphBuilder.RandomValues(21, 12);

    [Fact]
    public void RandomBytesAreNotOnnx()
    {
        var bytes = new byte[4096];
        new Random(5).NextBytes(bytes);

        AssertRefused("model-not-onnx", () => OnnxModel.Load(bytes, "noise"), "not");
    }

    [Fact]
    public void TruncatedModelIsNotOnnx()
    {
        var whole = MatMulModel().ToBytes();

        AssertRefused("model-not-onnx", () => OnnxModel.Load(whole[..(whole.Length * 2 / 3)], "cut"), "truncated");
    }

    [Fact]
    public void PngRenamedToOnnxIsNotOnnx()
    {
        // The eight-byte PNG file signature (PNG specification, section 5.2) followed by an IHDR chunk header.
        byte[] png = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A, 0, 0, 0, 13, .. Encoding.ASCII.GetBytes("IHDR"), 0, 0, 0, 1, 0, 0, 0, 1, 8, 2, 0, 0, 0];

        AssertRefused("model-not-onnx", () => OnnxModel.Load(png, "photo"), "PNG");
    }

    [Fact]
    public void EmptyUploadIsNotOnnx() => AssertRefused("model-not-onnx", () => OnnxModel.Load([], "empty"), "empty");

    [Fact]
    public void QuantizeLinearNodeMeansAlreadyQuantized()
    {
        var bytes = MatMulModel()
            .Initializer("s", [], [0.1f])
            .Node("QuantizeLinear", ["y", "s"], ["yq"], "q_out")
            .ToBytes();

        AssertRefused("model-already-quantized", () => OnnxModel.Load(bytes, "m"), "'q_out' is QuantizeLinear");
    }

    [Fact]
    public void Int8WeightMeansAlreadyQuantized()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Initializer(GraphBuilder.Int8Tensor("w8", [4, 3], [1, -2, 3, -4, 5, -6, 7, -8, 9, -10, 11, -12]))
            .Node("Cast", ["w8"], ["w"], "widen", GraphBuilder.IntAttribute("to", (long)P.TensorProto.Types.DataType.Float))
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", 2, 3).ToBytes();

        AssertRefused("model-already-quantized", () => OnnxModel.Load(bytes, "m"), "INT8");
    }

    [Fact]
    public void ExternalDataIsRefusedWithoutFollowingThePath()
    {
        var model = MatMulModel().Build();
        var tensor = model.Graph.Initializer.Single();
        tensor.RawData = ByteString.Empty;
        tensor.DataLocation = P.TensorProto.Types.DataLocation.External;
        tensor.ExternalData.Add(new P.StringStringEntryProto { Key = "location", Value = "../../etc/passwd" });

        AssertRefused("model-external-data", () => OnnxModel.Load(model.ToByteArray(), "m"), "embed");
    }

    [Fact]
    public void ExternalDataEntryWithoutLocationFlagIsRefused()
    {
        var model = MatMulModel().Build();
        model.Graph.Initializer.Single().ExternalData.Add(new P.StringStringEntryProto { Key = "location", Value = "/etc/shadow" });

        AssertRefused("model-external-data", () => OnnxModel.Load(model.ToByteArray(), "m"), "external");
    }

    [Fact]
    public void Float64WeightIsRefused()
    {
        var bytes = new GraphBuilder()
            .Input("x", P.TensorProto.Types.DataType.Double, 2, 4)
            .Initializer(GraphBuilder.DoubleTensor("w", [4, 3], W.Select(v => (double)v).ToArray()))
            .Node("MatMul", ["x", "w"], ["y"], "fc")
            .Output("y", P.TensorProto.Types.DataType.Double, 2, 3).ToBytes();

        AssertRefused("model-non-float-weights", () => OnnxModel.Load(bytes, "m"), "DOUBLE");
    }

    [Fact]
    public void ModelWithoutWeightLayersIsRefused()
    {
        var bytes = new GraphBuilder()
            .Input("x", 2, 4).Node("Relu", ["x"], ["y"], "act").Output("y", 2, 4).ToBytes();

        AssertRefused("model-no-layers", () => OnnxModel.Load(bytes, "m"), "no quantizable layer");
    }

    [Fact]
    public void NodeInputThatNothingDefinesIsInvalid()
    {
        var bytes = MatMulModel().Node("Add", ["y", "ghost"], ["z"], "add").ToBytes();

        AssertRefused("model-invalid", () => OnnxModel.Load(bytes, "m"), "'ghost'");
    }

    [Fact]
    public void MissingFileIsReportedByName()
    {
        var path = Path.Combine(Path.GetTempPath(), $"bitbudget-missing-{Guid.NewGuid():N}.onnx");

        AssertRefused("model-not-found", () => OnnxModel.LoadFile(path), path);
    }

    private static GraphBuilder MatMulModel() => new GraphBuilder()
        .Input("x", 2, 4).Initializer("w", [4, 3], W)
        .Node("MatMul", ["x", "w"], ["y"], "fc")
        .Output("y", 2, 3);

    private static void AssertRefused(string code, Func<OnnxModel> load, string messagePart)
    {
        var ex = Assert.Throws<EngineException>(() => load());
        Assert.Equal(code, ex.Code);
        Assert.Contains(messagePart, ex.Message, StringComparison.Ordinal);
        Assert.DoesNotContain('\n', ex.Message);
        Assert.EndsWith(".", ex.Message, StringComparison.Ordinal);
    }
}
