using Google.Protobuf;
using Onnx;

namespace Bitbudget.Service.Demo;

/// <summary>
/// Writes <see cref="HiveNet"/> as an FP32 ONNX model: IR version 10, default-domain opset 21 (so a
/// 4-bit QDQ export of it needs no opset change), weights as named initializers, and the
/// BatchNormalization nodes kept in inference form so the engine's BN folding has work to do.
/// </summary>
internal static class HiveNetExporter
{
    public const string InputName = "spectrogram";
    public const string OutputName = "logits";
    public const string BatchDimension = "batch";
    public const long IrVersion = 10;
    public const long Opset = 21;
    public const string Producer = "bitbudget-demo";

    public static byte[] Export(HiveNet net) => Build(net).ToByteArray();

    public static ModelProto Build(HiveNet net)
    {
        ArgumentNullException.ThrowIfNull(net);
        var graph = new GraphProto
        {
            Name = "hive_monitor",
            DocString = "Hive-state classifier of the invented Quillbrook Valley demo: 16x16 sound spectrogram patch in, four class logits out.",
        };

        graph.Input.Add(TensorValue(InputName, 1, HiveNet.InputSize, HiveNet.InputSize));
        graph.Output.Add(TensorValue(OutputName, HiveNet.Classes));

        int size = HiveNet.InputSize;
        int size2 = HiveNet.Size2;
        graph.Initializer.Add(Tensor("conv1.weight", net.Conv1Weight, HiveNet.Channels1, 1, 3, 3));
        AddBatchNormInitializers(graph, "bn1", net.Bn1Scale, net.Bn1Bias, net.Bn1Mean, net.Bn1Variance);
        graph.Initializer.Add(Tensor("conv2.weight", net.Conv2Weight, HiveNet.Channels2, HiveNet.Channels1, 3, 3));
        AddBatchNormInitializers(graph, "bn2", net.Bn2Scale, net.Bn2Bias, net.Bn2Mean, net.Bn2Variance);
        graph.Initializer.Add(Tensor("fc1.weight", net.Fc1Weight, HiveNet.Hidden, HiveNet.Flattened));
        graph.Initializer.Add(Tensor("fc1.bias", net.Fc1Bias, HiveNet.Hidden));
        graph.Initializer.Add(Tensor("fc2.weight", net.Fc2Weight, HiveNet.Classes, HiveNet.Hidden));
        graph.Initializer.Add(Tensor("fc2.bias", net.Fc2Bias, HiveNet.Classes));

        graph.Node.Add(Conv("conv1", InputName, "conv1.weight", "conv1.out", stride: 1));
        graph.Node.Add(BatchNorm("bn1", "conv1.out", "bn1.out"));
        graph.Node.Add(Node("Relu", "relu1", ["bn1.out"], "relu1.out"));
        graph.Node.Add(Conv("conv2", "relu1.out", "conv2.weight", "conv2.out", stride: HiveNet.Stride2));
        graph.Node.Add(BatchNorm("bn2", "conv2.out", "bn2.out"));
        graph.Node.Add(Node("Relu", "relu2", ["bn2.out"], "relu2.out"));
        NodeProto flatten = Node("Flatten", "flatten", ["relu2.out"], "flatten.out");
        flatten.Attribute.Add(IntAttribute("axis", 1));
        graph.Node.Add(flatten);
        graph.Node.Add(Gemm("fc1", "flatten.out", "fc1", "fc1.out"));
        graph.Node.Add(Node("Relu", "relu3", ["fc1.out"], "relu3.out"));
        graph.Node.Add(Gemm("fc2", "relu3.out", "fc2", OutputName));

        // Intermediate shapes, so readers that do not run shape inference still see the layer sizes.
        graph.ValueInfo.Add(TensorValue("conv1.out", HiveNet.Channels1, size, size));
        graph.ValueInfo.Add(TensorValue("bn1.out", HiveNet.Channels1, size, size));
        graph.ValueInfo.Add(TensorValue("relu1.out", HiveNet.Channels1, size, size));
        graph.ValueInfo.Add(TensorValue("conv2.out", HiveNet.Channels2, size2, size2));
        graph.ValueInfo.Add(TensorValue("bn2.out", HiveNet.Channels2, size2, size2));
        graph.ValueInfo.Add(TensorValue("relu2.out", HiveNet.Channels2, size2, size2));
        graph.ValueInfo.Add(TensorValue("flatten.out", HiveNet.Flattened));
        graph.ValueInfo.Add(TensorValue("fc1.out", HiveNet.Hidden));
        graph.ValueInfo.Add(TensorValue("relu3.out", HiveNet.Hidden));

        var model = new ModelProto
        {
            IrVersion = IrVersion,
            ProducerName = Producer,
            ProducerVersion = "1",
            ModelVersion = 1,
            DocString = "Demo model of an invented setting; trained on synthetic data.",
            Graph = graph,
        };
        model.OpsetImport.Add(new OperatorSetIdProto { Domain = string.Empty, Version = Opset });
        model.MetadataProps.Add(new StringStringEntryProto { Key = "classes", Value = string.Join(",", HiveSoundSynthesizer.ClassNames) });
        return model;
    }

    private static void AddBatchNormInitializers(GraphProto graph, string name, float[] scale, float[] bias, float[] mean, float[] variance)
    {
        graph.Initializer.Add(Tensor($"{name}.scale", scale, scale.Length));
        graph.Initializer.Add(Tensor($"{name}.bias", bias, bias.Length));
        graph.Initializer.Add(Tensor($"{name}.mean", mean, mean.Length));
        graph.Initializer.Add(Tensor($"{name}.var", variance, variance.Length));
    }

    private static NodeProto Conv(string name, string input, string weight, string output, int stride)
    {
        NodeProto node = Node("Conv", name, [input, weight], output);
        node.Attribute.Add(IntsAttribute("kernel_shape", 3, 3));
        node.Attribute.Add(IntsAttribute("pads", 1, 1, 1, 1));
        node.Attribute.Add(IntsAttribute("strides", stride, stride));
        return node;
    }

    private static NodeProto BatchNorm(string name, string input, string output)
    {
        NodeProto node = Node("BatchNormalization", name, [input, $"{name}.scale", $"{name}.bias", $"{name}.mean", $"{name}.var"], output);
        node.Attribute.Add(new AttributeProto { Name = "epsilon", Type = AttributeProto.Types.AttributeType.Float, F = HiveNet.BatchNormEpsilon });
        return node;
    }

    private static NodeProto Gemm(string name, string input, string parameterPrefix, string output)
    {
        NodeProto node = Node("Gemm", name, [input, $"{parameterPrefix}.weight", $"{parameterPrefix}.bias"], output);
        node.Attribute.Add(IntAttribute("transB", 1));
        return node;
    }

    internal static NodeProto Node(string opType, string name, string[] inputs, string output)
    {
        var node = new NodeProto { OpType = opType, Name = name, Domain = string.Empty };
        node.Input.AddRange(inputs);
        node.Output.Add(output);
        return node;
    }

    internal static AttributeProto IntAttribute(string name, long value) =>
        new() { Name = name, Type = AttributeProto.Types.AttributeType.Int, I = value };

    private static AttributeProto IntsAttribute(string name, params long[] values)
    {
        var attribute = new AttributeProto { Name = name, Type = AttributeProto.Types.AttributeType.Ints };
        attribute.Ints.AddRange(values);
        return attribute;
    }

    internal static TensorProto Tensor(string name, float[] values, params long[] dims)
    {
        long expected = 1;
        foreach (long d in dims)
        {
            expected *= d;
        }

        if (expected != values.Length)
        {
            throw new InvalidOperationException($"Initializer {name} holds {values.Length} values but its shape needs {expected}.");
        }

        // ONNX raw_data is little-endian; copy element by element so a big-endian host writes the same bytes.
        var bytes = new byte[values.Length * sizeof(float)];
        for (int i = 0; i < values.Length; i++)
        {
            System.Buffers.Binary.BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(i * sizeof(float)), values[i]);
        }

        var tensor = new TensorProto { Name = name, DataType = (int)TensorProto.Types.DataType.Float, RawData = ByteString.CopyFrom(bytes) };
        tensor.Dims.AddRange(dims);
        return tensor;
    }

    /// <summary>A float tensor value whose first dimension is the symbolic batch.</summary>
    private static ValueInfoProto TensorValue(string name, params long[] dimsAfterBatch)
    {
        var shape = new TensorShapeProto();
        shape.Dim.Add(new TensorShapeProto.Types.Dimension { DimParam = BatchDimension });
        foreach (long d in dimsAfterBatch)
        {
            shape.Dim.Add(new TensorShapeProto.Types.Dimension { DimValue = d });
        }

        return new ValueInfoProto
        {
            Name = name,
            Type = new TypeProto
            {
                TensorType = new TypeProto.Types.Tensor { ElemType = (int)TensorProto.Types.DataType.Float, Shape = shape },
            },
        };
    }
}
