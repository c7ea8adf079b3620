using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// Every written form of an integer weight (DequantizeLinear per-tensor or per-axis; Cast, Sub and Mul where the
/// opset has no per-axis DequantizeLinear or none at all), for every operator with weights, both schemes and both
/// granularities, at opsets 9 to 21. Outside reference: ONNX Runtime runs the exported model and the FP32 model
/// whose weights are s (q - z) written out as floats (the fake-quantized model); both must give the same outputs.
/// </summary>
public sealed class WeightStorageTests
{
    public static TheoryData<string, long, QuantizationScheme, Granularity, int> Cases()
    {
        var data = new TheoryData<string, long, QuantizationScheme, Granularity, int>();
        foreach (var op in new[] { "Conv", "ConvTranspose", "GemmTransB0", "GemmTransB1", "MatMul" })
        {
            foreach (var opset in new long[] { 9, 10, 11, 12, 13, 21 })
            {
                foreach (var scheme in new[] { QuantizationScheme.Symmetric, QuantizationScheme.Asymmetric })
                {
                    foreach (var granularity in new[] { Granularity.PerTensor, Granularity.PerChannel })
                    {
                        data.Add(op, opset, scheme, granularity, 3);
                        data.Add(op, opset, scheme, granularity, 8);
                    }
                }
            }
        }

        return data;
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void IntegerWeightsGiveTheFakeQuantizedModelsOutputsInOnnxRuntime(string op, long opset, QuantizationScheme scheme, Granularity granularity, int bits)
    {
        var (model, input, inputShape) = OneLayer(op, opset);
        var layer = model.Layers.Single();
        var setting = new LayerSetting(bits, scheme, granularity);

        var exported = QdqExporter.Export(model, new Dictionary<string, LayerSetting> { [layer.Name] = setting });

        // The file holds integers: one byte per weight, half a byte for 2-4 bits from opset 21, and no FP32 copy.
        var proto = SmallModels.Parse(exported.Bytes);
        Assert.Equal(opset, proto.OpsetImport.Single(o => o.Domain is "" or "ai.onnx").Version);
        Assert.DoesNotContain(proto.Graph.Initializer, t => t.Name == layer.WeightName);
        var stored = proto.Graph.Initializer.Single(t => t.Name == layer.WeightName + "#levels");
        var int4 = bits <= 4 && opset >= 21;
        var expectedType = (scheme, int4) switch
        {
            (QuantizationScheme.Symmetric, true) => P.TensorProto.Types.DataType.Int4,
            (QuantizationScheme.Asymmetric, true) => P.TensorProto.Types.DataType.Uint4,
            (QuantizationScheme.Symmetric, false) => P.TensorProto.Types.DataType.Int8,
            _ => P.TensorProto.Types.DataType.Uint8,
        };
        Assert.Equal((int)expectedType, stored.DataType);
        Assert.Equal(int4 ? (layer.ParameterCount + 1) / 2 : layer.ParameterCount, stored.RawData.Length);
        var usesDequantizeLinear = opset >= 13 || (opset >= 10 && granularity == Granularity.PerTensor);
        Assert.Equal(usesDequantizeLinear, proto.Graph.Node.Any(n => n.OpType == "DequantizeLinear"));

        // The reference: the same weights fake-quantized (s (q - z) in FP32) in an otherwise unchanged FP32 model.
        var fake = new float[layer.ParameterCount];
        WeightQuantizer.FakeQuantize(model.GetWeight(layer), layer.Shape, layer.ChannelAxis, setting, fake);
        var reference = model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = fake });

        // Deployment settings (all optimisations). ONNX Runtime fuses DequantizeLinear into a MatMul, and into a Gemm that
        // reads B untransposed, and then quantizes the activations too (relative MSE up to about 1e-2 here) unless the
        // accuracy level the note names is set; the note must be there exactly for those layers.
        using var options = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_ENABLE_ALL };
        if (exported.Note?.Contains(QdqExporter.MatMulAccuracyOption, StringComparison.Ordinal) == true)
        {
            options.AddSessionConfigEntry(QdqExporter.MatMulAccuracyOption, "1");
        }

        Assert.Equal(op is "MatMul" or "GemmTransB0" && usesDequantizeLinear, exported.Note?.Contains(QdqExporter.MatMulAccuracyOption, StringComparison.Ordinal) == true);
        var expected = Run(reference, input, inputShape, options);
        var actual = Run(exported.Bytes, input, inputShape, options);
        Assert.Equal(expected.Length, actual.Length);
        double noise = 0, signal = 0;
        for (var i = 0; i < expected.Length; i++)
        {
            noise += (expected[i] - actual[i]) * (double)(expected[i] - actual[i]);
            signal += expected[i] * (double)expected[i];
        }

        var worst = noise / signal;

        // Float rounding only: the Cast/Sub/Mul form folds to the very same FP32 weights; DequantizeLinear computes
        // (q - z) s, the same product, but ONNX Runtime may order the convolution's sums differently around it.
        Assert.True(worst < 1e-10, $"{op} at opset {opset}, {scheme} {granularity} {bits} bits: relative MSE {worst}");
    }

    private static float[] Run(byte[] model, float[] input, long[] shape, SessionOptions options)
    {
        using var session = new InferenceSession(model, options);
        using var value = OrtValue.CreateTensorValueFromMemory(input, shape);
        using var runOptions = new RunOptions();
        using var results = session.Run(runOptions, [session.InputNames[0]], [value], session.OutputNames);
        return results[0].GetTensorDataAsSpan<float>().ToArray();
    }

    /// <summary>A one-layer model of the operator at an opset, with a bias where the operator takes one, and an input for it.</summary>
    internal static (OnnxModel Model, float[] Input, long[] InputShape) OneLayer(string op, long opset)
    {
        var builder = new GraphBuilder().Opset(opset).IrVersion(opset >= 21 ? 10 : 7);
        long[] inputShape;
        switch (op)
        {
            case "Conv":
                inputShape = [2, 3, 8, 8];
                builder.Input("x", inputShape).Output("y", 2, 4, 6, 6)
                    .Initializer("w", [4, 3, 3, 3], Spread(GraphBuilder.RandomValues(1, 108), 4, 27))
                    .Initializer("b", [4], GraphBuilder.RandomValues(2, 4, 0.1f))
                    .Node("Conv", ["x", "w", "b"], ["y"], "layer");
                break;
            case "ConvTranspose":
                // W is [C_in, C_out, k, k]; its output channels are axis 1.
                inputShape = [2, 4, 5, 5];
                builder.Input("x", inputShape).Output("y", 2, 3, 7, 7)
                    .Initializer("w", [4, 3, 3, 3], GraphBuilder.RandomValues(3, 108))
                    .Node("ConvTranspose", ["x", "w"], ["y"], "layer");
                break;
            case "GemmTransB0":
                inputShape = [5, 16];
                builder.Input("x", inputShape).Output("y", 5, 12)
                    .Initializer("w", [16, 12], GraphBuilder.RandomValues(4, 192))
                    .Initializer("b", [12], GraphBuilder.RandomValues(5, 12, 0.1f))
                    .Node("Gemm", ["x", "w", "b"], ["y"], "layer");
                break;
            case "GemmTransB1":
                inputShape = [5, 16];
                builder.Input("x", inputShape).Output("y", 5, 12)
                    .Initializer("w", [12, 16], Spread(GraphBuilder.RandomValues(6, 192), 12, 16))
                    .Initializer("b", [12], GraphBuilder.RandomValues(7, 12, 0.1f))
                    .Node("Gemm", ["x", "w", "b"], ["y"], "layer", GraphBuilder.IntAttribute("transB", 1));
                break;
            case "MatMul":
                inputShape = [5, 16];
                builder.Input("x", inputShape).Output("y", 5, 12)
                    .Initializer("w", [16, 12], GraphBuilder.RandomValues(8, 192))
                    .Node("MatMul", ["x", "w"], ["y"], "layer");
                break;
            default:
                throw new ArgumentOutOfRangeException(nameof(op), op, "unknown operator");
        }

        // Old IR versions list initializers among the graph inputs, as opset-9 exporters wrote them.
        var proto = builder.Build();
        if (opset < 10)
        {
            foreach (var tensor in proto.Graph.Initializer)
            {
                proto.Graph.Input.Add(new P.ValueInfoProto
                {
                    Name = tensor.Name,
                    Type = new P.TypeProto { TensorType = new P.TypeProto.Types.Tensor { ElemType = tensor.DataType, Shape = Shape(tensor.Dims) } },
                });
            }
        }

        var model = OnnxModel.Load(Google.Protobuf.MessageExtensions.ToByteArray(proto), op);
        var count = (int)inputShape.Aggregate(1L, (a, b) => a * b);
        return (model, GraphBuilder.RandomValues(9, count), inputShape);
    }

    private static P.TensorShapeProto Shape(IEnumerable<long> dims)
    {
        var shape = new P.TensorShapeProto();
        foreach (var d in dims)
        {
            shape.Dim.Add(new P.TensorShapeProto.Types.Dimension { DimValue = d });
        }

        return shape;
    }

    /// <summary>Rows of very different ranges, so per-channel scales differ from channel to channel.</summary>
    private static float[] Spread(float[] values, int rows, int rowLength)
    {
        for (var r = 0; r < rows; r++)
        {
            for (var i = 0; i < rowLength; i++)
            {
                values[(r * rowLength) + i] *= 1 + (3 * r);
            }
        }

        return values;
    }
}
