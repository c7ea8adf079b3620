using System.Runtime.InteropServices;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Support;

/// <summary>Builds tiny ONNX models in code: inputs, initializers, Constant nodes, nodes, outputs, opset.</summary>
internal sealed class GraphBuilder
{
    private readonly P.GraphProto graph = new() { Name = "test" };
    private long opset = 13;
    private long irVersion = 8;

    public GraphBuilder Opset(long version)
    {
        opset = version;
        return this;
    }

    public GraphBuilder IrVersion(long version)
    {
        irVersion = version;
        return this;
    }

    /// <summary>A FLOAT graph input; a negative dimension is dynamic, no dimensions make it a scalar.</summary>
    public GraphBuilder Input(string name, params long[] shape) => Input(name, P.TensorProto.Types.DataType.Float, shape);

    public GraphBuilder Input(string name, P.TensorProto.Types.DataType type, params long[] shape)
    {
        graph.Input.Add(Value(name, type, shape));
        return this;
    }

    /// <summary>A FLOAT graph output; no dimensions make it a scalar.</summary>
    public GraphBuilder Output(string name, params long[] shape) => Output(name, P.TensorProto.Types.DataType.Float, shape);

    public GraphBuilder Output(string name, P.TensorProto.Types.DataType type, params long[] shape)
    {
        graph.Output.Add(Value(name, type, shape));
        return this;
    }

    public GraphBuilder Initializer(string name, long[] dims, float[] values) => Initializer(FloatTensor(name, dims, values));

    public GraphBuilder Initializer(P.TensorProto tensor)
    {
        graph.Initializer.Add(tensor);
        return this;
    }

    /// <summary>A Constant node whose output is <paramref name="output"/>, holding FP32 values.</summary>
    public GraphBuilder Constant(string output, long[] dims, float[] values) => Constant(output, FloatTensor(output, dims, values));

    public GraphBuilder Constant(string output, P.TensorProto tensor) =>
        Node("Constant", [], [output], "", TensorAttribute("value", tensor));

    public GraphBuilder Node(string op, string[] inputs, string[] outputs, string name = "", params P.AttributeProto[] attributes)
    {
        var node = new P.NodeProto { OpType = op, Name = name };
        node.Input.AddRange(inputs);
        node.Output.AddRange(outputs);
        node.Attribute.AddRange(attributes);
        graph.Node.Add(node);
        return this;
    }

    public P.GraphProto BuildGraph() => graph.Clone();

    public P.ModelProto Build()
    {
        var model = new P.ModelProto { IrVersion = irVersion, ProducerName = "bitbudget-tests", Graph = graph.Clone() };
        model.OpsetImport.Add(new P.OperatorSetIdProto { Domain = "", Version = opset });
        return model;
    }

    public byte[] ToBytes() => Build().ToByteArray();

    public static P.TensorProto FloatTensor(string name, long[] dims, float[] values)
    {
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Float };
        tensor.Dims.AddRange(dims);
        tensor.RawData = ByteString.CopyFrom(MemoryMarshal.AsBytes(values.AsSpan()));
        return tensor;
    }

    public static P.TensorProto HalfTensor(string name, long[] dims, float[] values)
    {
        var halves = values.Select(v => (Half)v).ToArray();
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Float16 };
        tensor.Dims.AddRange(dims);
        tensor.RawData = ByteString.CopyFrom(MemoryMarshal.AsBytes(halves.AsSpan()));
        return tensor;
    }

    public static P.TensorProto DoubleTensor(string name, long[] dims, double[] values)
    {
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Double };
        tensor.Dims.AddRange(dims);
        tensor.DoubleData.AddRange(values);
        return tensor;
    }

    public static P.TensorProto Int8Tensor(string name, long[] dims, sbyte[] values)
    {
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Int8 };
        tensor.Dims.AddRange(dims);
        tensor.RawData = ByteString.CopyFrom(MemoryMarshal.AsBytes(values.AsSpan()));
        return tensor;
    }

    public static P.AttributeProto IntAttribute(string name, long value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Int, I = value };

    public static P.AttributeProto IntsAttribute(string name, params long[] values)
    {
        var attribute = new P.AttributeProto { Name = name, Type = P.AttributeProto.Types.AttributeType.Ints };
        attribute.Ints.AddRange(values);
        return attribute;
    }

    public static P.AttributeProto FloatAttribute(string name, float value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Float, F = value };

    public static P.AttributeProto TensorAttribute(string name, P.TensorProto value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Tensor, T = value };

    public static P.AttributeProto GraphAttribute(string name, P.GraphProto value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Graph, G = value };

    /// <summary>Deterministic values uniform in [-scale, scale).</summary>
    public static float[] RandomValues(int seed, int count, float scale = 1f)
    {
        var random = new Random(seed);
        var values = new float[count];
        for (var i = 0; i < values.Length; i++)
        {
            values[i] = (float)((random.NextDouble() * 2 - 1) * scale);
        }

        return values;
    }

    private static P.ValueInfoProto Value(string name, P.TensorProto.Types.DataType type, long[] shape)
    {
        var tensorType = new P.TypeProto.Types.Tensor { ElemType = (int)type, Shape = new P.TensorShapeProto() };
        foreach (var dim in shape)
        {
            tensorType.Shape.Dim.Add(dim < 0
                ? new P.TensorShapeProto.Types.Dimension { DimParam = "n" }
                : new P.TensorShapeProto.Types.Dimension { DimValue = dim });
        }

        return new P.ValueInfoProto { Name = name, Type = new P.TypeProto { TensorType = tensorType } };
    }
}
