using Google.Protobuf;
using Onnx;
using static Bitbudget.Service.Demo.HiveNetExporter;

namespace Bitbudget.Service.Demo;

/// <summary>
/// Writes <see cref="HiveStream"/> as an FP32 ONNX model (opset 21) from plain operators (MatMul, Add,
/// Mul, Tanh, Sigmoid, Split, Concat), so it needs no recurrent operator: inputs "frame" [batch, 16],
/// "state" [2, batch, 12] (samples on axis 1) and "sample_rate" (a scalar int64); outputs
/// "swarm_probability" [batch, 1] and "next_state" [2, batch, 12].
/// </summary>
internal static class HiveStreamExporter
{
    public const string FrameName = "frame";
    public const string StateName = "state";
    public const string SampleRateName = "sample_rate";
    public const string ProbabilityName = "swarm_probability";
    public const string NextStateName = "next_state";

    public static byte[] Export(HiveStream stream)
    {
        ArgumentNullException.ThrowIfNull(stream);
        var graph = new GraphProto
        {
            Name = "hive_stream",
            DocString = "Streaming swarm detector of the invented Quillbrook Valley demo: one spectrogram column and the carried state in, swarm probability and next state out.",
        };
        graph.Input.Add(Value(FrameName, TensorProto.Types.DataType.Float, null, HiveStream.Bands));
        graph.Input.Add(Value(StateName, TensorProto.Types.DataType.Float, 2, null, HiveStream.Units));
        graph.Input.Add(Value(SampleRateName, TensorProto.Types.DataType.Int64));
        graph.Output.Add(Value(ProbabilityName, TensorProto.Types.DataType.Float, null, 1));
        graph.Output.Add(Value(NextStateName, TensorProto.Types.DataType.Float, 2, null, HiveStream.Units));

        graph.Initializer.Add(Tensor("stream_in.weight", stream.InWeight, HiveStream.Bands, HiveStream.Units));
        graph.Initializer.Add(Tensor("stream_fast.weight", stream.FastWeight, HiveStream.Units, HiveStream.Units));
        graph.Initializer.Add(Tensor("stream_head.weight", stream.HeadWeight, 2 * HiveStream.Units, 1));
        graph.Initializer.Add(Tensor("per_hz", [1f / HiveStream.SampleRate]));
        graph.Initializer.Add(Tensor("keep", [1 - HiveStream.SlowRate]));
        graph.Initializer.Add(Tensor("take", [HiveStream.SlowRate]));

        var split = new NodeProto { OpType = "Split", Name = "split_state" };
        split.Input.Add(StateName);
        split.Output.AddRange(["fast_in", "slow_in"]);
        split.Attribute.Add(IntAttribute("axis", 0));
        split.Attribute.Add(IntAttribute("num_outputs", 2));
        graph.Node.Add(split);
        var cast = Node("Cast", "rate_to_float", [SampleRateName], "rate");
        cast.Attribute.Add(IntAttribute("to", (long)TensorProto.Types.DataType.Float));
        graph.Node.Add(cast);
        graph.Node.Add(Node("Mul", "rate_scale", ["rate", "per_hz"], "scale"));
        graph.Node.Add(Node("Mul", "scale_frame", [FrameName, "scale"], "x"));
        graph.Node.Add(Node("MatMul", "stream_in", ["x", "stream_in.weight"], "a"));
        graph.Node.Add(Node("MatMul", "stream_fast", ["fast_in", "stream_fast.weight"], "r"));
        graph.Node.Add(Node("Add", "mix", ["a", "r"], "pre"));
        graph.Node.Add(Node("Tanh", "tanh", ["pre"], "fast"));
        graph.Node.Add(Node("Mul", "slow_keep", ["slow_in", "keep"], "slow_kept"));
        graph.Node.Add(Node("Mul", "slow_take", ["fast", "take"], "slow_taken"));
        graph.Node.Add(Node("Add", "slow", ["slow_kept", "slow_taken"], "slow"));
        graph.Node.Add(Concat("both", ["fast", "slow"], "both", axis: 2));
        graph.Node.Add(Node("MatMul", "stream_head", ["both", "stream_head.weight"], "logit3"));
        var flatten = Node("Flatten", "drop_lead_axis", ["logit3"], "logit");
        flatten.Attribute.Add(IntAttribute("axis", 2));
        graph.Node.Add(flatten);
        graph.Node.Add(Node("Sigmoid", "sigmoid", ["logit"], ProbabilityName));
        graph.Node.Add(Concat("stack_state", ["fast", "slow"], NextStateName, axis: 0));

        var model = new ModelProto
        {
            IrVersion = IrVersion,
            ProducerName = Producer,
            ProducerVersion = "1",
            ModelVersion = 1,
            DocString = "Demo streaming model of an invented setting; fixed seeded weights, not trained.",
            Graph = graph,
        };
        model.OpsetImport.Add(new OperatorSetIdProto { Domain = string.Empty, Version = Opset });
        return model.ToByteArray();
    }

    private static NodeProto Concat(string name, string[] inputs, string output, long axis)
    {
        var node = Node("Concat", name, inputs, output);
        node.Attribute.Add(IntAttribute("axis", axis));
        return node;
    }

    /// <summary>A tensor value; a null dimension is the symbolic batch, no dimensions make it a scalar.</summary>
    private static ValueInfoProto Value(string name, TensorProto.Types.DataType type, params long?[] dims)
    {
        var shape = new TensorShapeProto();
        foreach (var d in dims)
        {
            shape.Dim.Add(d is long size ? new TensorShapeProto.Types.Dimension { DimValue = size } : new TensorShapeProto.Types.Dimension { DimParam = BatchDimension });
        }

        return new ValueInfoProto { Name = name, Type = new TypeProto { TensorType = new TypeProto.Types.Tensor { ElemType = (int)type, Shape = shape } } };
    }
}
