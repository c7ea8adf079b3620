using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;
using Onnx;
using DataType = Onnx.TensorProto.Types.DataType;

namespace Bitbudget.Search.Tests.Quantization;

/// <summary>
/// Builds one- and two-node ONNX models around the standard QuantizeLinear and DequantizeLinear operators and
/// runs them with ONNX Runtime (Microsoft.ML.OnnxRuntime 1.31.1, CPU), the bit-exact reference for our kernels.
/// </summary>
internal static class QdqReferenceModels
{
    /// <summary>
    /// Runs x -> QuantizeLinear(scale, zero point) and reads the integer levels. The levels are read twice:
    /// raw from the quantized output where C# has the element type (int8, uint8), and for every type through
    /// a DequantizeLinear with scale 1 and zero point 0, which returns each level as an exact float.
    /// Also returns DequantizeLinear(QuantizeLinear(x)) with the real scale and zero point.
    /// </summary>
    public static (int[] Levels, float[] Dequantized) QuantizeDequantize(
        float[] x, long[] shape, float[] scales, int[] zeroPoints, int axis, DataType levelType, int opset)
    {
        var graph = new GraphProto { Name = "qdq" };
        graph.Input.Add(ValueInfo("x", DataType.Float, shape));
        graph.Initializer.Add(FloatTensor("scale", scales, axis));
        graph.Initializer.Add(LevelTensor("zero_point", zeroPoints, levelType, axis < 0 ? [] : [zeroPoints.Length]));
        graph.Initializer.Add(FloatTensor("one", [1f], -1));
        graph.Node.Add(Node("QuantizeLinear", ["x", "scale", "zero_point"], "q", axis));
        graph.Node.Add(Node("DequantizeLinear", ["q", "scale", "zero_point"], "y", axis));
        graph.Node.Add(Node("DequantizeLinear", ["q", "one"], "levels", -1));
        // The C# binding (1.31.1) cannot describe a 4-bit graph output, so "q" is an output for 8-bit types only.
        bool rawReadable = levelType is DataType.Int8 or DataType.Uint8;
        graph.Output.Add(ValueInfo("y", DataType.Float, shape));
        graph.Output.Add(ValueInfo("levels", DataType.Float, shape));
        if (rawReadable)
        {
            graph.Output.Add(ValueInfo("q", levelType, shape));
        }

        using var session = new InferenceSession(ToBytes(graph, opset));
        using var input = OrtValue.CreateTensorValueFromMemory(x, shape);
        using var runOptions = new RunOptions();
        string[] outputNames = rawReadable ? ["y", "levels", "q"] : ["y", "levels"];
        using var outputs = session.Run(runOptions, ["x"], [input], outputNames);
        var outputList = outputs.ToList();
        float[] levelsAsFloat = outputList[1].GetTensorDataAsSpan<float>().ToArray();
        int[] levels = levelsAsFloat.Select(v => checked((int)v)).ToArray();
        if (rawReadable)
        {
            int[] raw = levelType == DataType.Int8
                ? outputList[2].GetTensorDataAsSpan<sbyte>().ToArray().Select(v => (int)v).ToArray()
                : outputList[2].GetTensorDataAsSpan<byte>().ToArray().Select(v => (int)v).ToArray();
            if (!raw.SequenceEqual(levels))
            {
                throw new InvalidOperationException("The unit-scale DequantizeLinear read-out disagrees with the raw levels.");
            }
        }

        return (levels, outputList[0].GetTensorDataAsSpan<float>().ToArray());
    }

    /// <summary>Runs DequantizeLinear on integer levels stored as an initializer of the given type.</summary>
    public static float[] Dequantize(int[] levels, long[] shape, float[] scales, int[] zeroPoints, int axis, DataType levelType, int opset)
    {
        var graph = new GraphProto { Name = "dq" };
        graph.Initializer.Add(LevelTensor("levels", levels, levelType, shape));
        graph.Initializer.Add(FloatTensor("scale", scales, axis));
        graph.Initializer.Add(LevelTensor("zero_point", zeroPoints, levelType, axis < 0 ? [] : [zeroPoints.Length]));
        graph.Node.Add(Node("DequantizeLinear", ["levels", "scale", "zero_point"], "y", axis));
        graph.Output.Add(ValueInfo("y", DataType.Float, shape));

        using var session = new InferenceSession(ToBytes(graph, opset));
        using var runOptions = new RunOptions();
        using var outputs = session.Run(runOptions, Array.Empty<string>(), Array.Empty<OrtValue>(), ["y"]);
        return outputs.First().GetTensorDataAsSpan<float>().ToArray();
    }

    private static byte[] ToBytes(GraphProto graph, int opset)
    {
        // IR version 10 is the first to know the 4-bit types (ONNX 1.16, opset 21).
        var model = new ModelProto { IrVersion = opset >= 21 ? 10 : 7, Graph = graph, ProducerName = "bitbudget-tests" };
        model.OpsetImport.Add(new OperatorSetIdProto { Domain = "", Version = opset });
        return model.ToByteArray();
    }

    private static NodeProto Node(string op, string[] inputs, string output, int axis)
    {
        var node = new NodeProto { OpType = op, Name = $"{op}_{output}" };
        node.Input.Add(inputs);
        node.Output.Add(output);
        if (axis >= 0)
        {
            node.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = axis });
        }

        return node;
    }

    private static ValueInfoProto ValueInfo(string name, DataType type, long[] shape)
    {
        var tensorType = new TypeProto.Types.Tensor { ElemType = (int)type, Shape = new TensorShapeProto() };
        foreach (long dim in shape)
        {
            tensorType.Shape.Dim.Add(new TensorShapeProto.Types.Dimension { DimValue = dim });
        }

        return new ValueInfoProto { Name = name, Type = new TypeProto { TensorType = tensorType } };
    }

    /// <summary>A scalar (per-tensor) or 1-D (per-axis) float tensor.</summary>
    private static TensorProto FloatTensor(string name, float[] values, int axis)
    {
        var tensor = new TensorProto { Name = name, DataType = (int)DataType.Float };
        if (axis >= 0)
        {
            tensor.Dims.Add(values.Length);
        }

        tensor.FloatData.Add(axis >= 0 ? values : values.Take(1));
        return tensor;
    }

    /// <summary>Integer tensor in raw little-endian bytes; 4-bit types pack two per byte, first element in the low nibble (ONNX IR spec).</summary>
    private static TensorProto LevelTensor(string name, int[] values, DataType type, long[] shape)
    {
        var tensor = new TensorProto { Name = name, DataType = (int)type };
        tensor.Dims.Add(shape);
        byte[] raw = type switch
        {
            DataType.Int8 => values.Select(v => (byte)checked((sbyte)v)).ToArray(),
            DataType.Uint8 => values.Select(v => checked((byte)v)).ToArray(),
            DataType.Int4 or DataType.Uint4 => PackNibbles(values, type == DataType.Int4),
            _ => throw new ArgumentOutOfRangeException(nameof(type), type, "Not a level type."),
        };
        tensor.RawData = ByteString.CopyFrom(raw);
        return tensor;
    }

    private static byte[] PackNibbles(int[] values, bool signed)
    {
        var packed = new byte[(values.Length + 1) / 2];
        for (int i = 0; i < values.Length; i++)
        {
            int v = values[i];
            if (signed ? v is < -8 or > 7 : v is < 0 or > 15)
            {
                throw new ArgumentOutOfRangeException(nameof(values), v, "Does not fit four bits.");
            }

            packed[i / 2] |= (byte)((v & 0xF) << (i % 2 == 0 ? 0 : 4));
        }

        return packed;
    }
}
