using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Writes the quantized model in the ONNX QDQ form: each quantized weight becomes an integer
/// initializer with its scale and zero point, and a DequantizeLinear node that yields the FP32
/// weight the layer reads. Storage follows the ONNX operator set: per-axis DequantizeLinear needs
/// opset 13, 4-bit integer types need opset 21, and the model's opset is never raised (raising it
/// changes the meaning of other operators). Widths without their own type (3, 5, 6, 7 bits) are
/// stored in the next wider type with the narrower range. A model whose opset is too old gets its
/// weights snapped to the grid in FP32 instead, with a note saying why.
/// </summary>
public static class QdqExporter
{
    /// <summary>First opset with DequantizeLinear.</summary>
    public const long PerTensorOpset = 10;

    /// <summary>First opset with the axis attribute of DequantizeLinear.</summary>
    public const long PerAxisOpset = 13;

    /// <summary>First opset with INT4/UINT4.</summary>
    public const long Int4Opset = 21;

    /// <summary>The ONNX Runtime session option that sets how a fused DequantizeLinear+MatMul computes.</summary>
    public const string MatMulAccuracyOption = "session.qdq_matmulnbits_accuracy_level";

    /// <summary>
    /// ONNX Runtime's CPU provider fuses DequantizeLinear+MatMul into its MatMulNBits kernel and by default
    /// computes it with 8-bit activations, which adds error that a weights-only measurement does not see
    /// (observed with Microsoft.ML.OnnxRuntime 1.31; see QdqExporterTests).
    /// </summary>
    public const string MatMulNote =
        "MatMul weights are stored as DequantizeLinear+MatMul. ONNX Runtime on CPU fuses that pair and, at its default accuracy level, " +
        "also quantizes the MatMul's activations to 8 bits, which adds error beyond what was measured here (weights only). " +
        "To run as measured, set the session option " + MatMulAccuracyOption + "=1; otherwise re-measure with your runtime's settings.";

    /// <summary>
    /// Exports <paramref name="model"/> with each layer stored as <paramref name="assignment"/> says (by layer name;
    /// missing layers stay FP32). With <paramref name="activations"/>, every layer at an integer bit width also
    /// gets QuantizeLinear/DequantizeLinear (uint8, per-tensor) on its input activation; that needs opset 13.
    /// Run unoptimised, such a model reproduces the validation trial exactly; with ONNX Runtime's default
    /// optimisations it stays within a relative MSE of 1e-8 of it (measured 9e-15 on the test MLP; 8-bit weights next to quantized activations are stored as uint8, see below).
    /// </summary>
    public static ExportedModel Export(
        OnnxModel model,
        IReadOnlyDictionary<string, LayerSetting> assignment,
        IReadOnlyList<ActivationQuantization>? activations = null)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(assignment);
        var quantizedActivations = (activations ?? [])
            .Where(a => assignment.TryGetValue(a.Layer, out var s) && BitWidths.IsInteger(s.Bits))
            .ToList();
        if (quantizedActivations.Count > 0 && model.Opset < ActivationQuantization.MinimumOpset)
        {
            throw new EngineException("settings-invalid", ActivationQuantization.OpsetMessage(model.Opset));
        }

        var needsPerAxis = assignment.Values.Any(s => BitWidths.IsInteger(s.Bits) && s.Granularity == Granularity.PerChannel);
        var required = needsPerAxis ? PerAxisOpset : PerTensorOpset;
        if (assignment.Values.Any(s => BitWidths.IsInteger(s.Bits)) && model.Opset < required)
        {
            var note = $"The model's opset is {model.Opset}; QDQ with {(needsPerAxis ? "per-channel scales" : "DequantizeLinear")} needs opset {required}. " +
                "The opset is not raised automatically because other operators change meaning across versions, so the weights are written in FP32, snapped to the quantization grid.";
            var snapped = assignment.ToDictionary(
                p => p.Key,
                p => Snap(model, p.Key, p.Value),
                StringComparer.Ordinal);
            return new ExportedModel(model.BuildWithWeights(snapped), "fake-quantized", model.Opset, note);
        }

        var proto = model.Proto.Clone();
        var graph = proto.Graph;
        var dequantizers = new List<NodeProto>();
        foreach (var layer in model.Layers)
        {
            if (!assignment.TryGetValue(layer.Name, out var setting) || setting.Bits == BitWidths.Float32)
            {
                continue;
            }

            var index = FindInitializer(graph, layer.WeightName);
            var weight = model.GetWeight(layer);
            graph.Initializer.RemoveAt(index);
            if (setting.Bits == BitWidths.Float16)
            {
                graph.Initializer.Add(HalfTensor(layer.WeightName + "_fp16", layer.Shape, weight));
                dequantizers.Add(CastToFloat(layer));
                continue;
            }

            var q = WeightQuantizer.Quantize(weight, layer.Shape, layer.ChannelAxis, setting);
            var type = StorageType(setting, model.Opset);
            if (type == TensorProto.Types.DataType.Int8 && quantizedActivations.Any(a => a.Layer == layer.Name))
            {
                // With uint8 activations ONNX Runtime fuses the QDQ pairs into integer kernels. On x86 CPUs
                // without VNNI its uint8 x int8 kernel sums pairs of products in 16 bits and saturates
                // (measured: relative MSE 1.05e-3 against the trial on an AVX2-only EPYC); its uint8 x uint8
                // kernel widens first and matches the trial to 1e-14. Same values, unsigned storage.
                q = q.ShiftedToUnsigned();
                type = TensorProto.Types.DataType.Uint8;
            }

            graph.Initializer.Add(IntegerTensor(layer.WeightName + "_quantized", layer.Shape, q.Levels, type));
            var perAxis = q.Axis >= 0;
            long[] paramShape = perAxis ? [q.Scales.Length] : [];
            var scale = new TensorProto { Name = layer.WeightName + "_scale", DataType = (int)TensorProto.Types.DataType.Float };
            scale.Dims.AddRange(paramShape);
            scale.FloatData.AddRange(q.Scales);
            graph.Initializer.Add(scale);
            graph.Initializer.Add(IntegerTensor(layer.WeightName + "_zero_point", paramShape, q.ZeroPoints, type));
            var node = new NodeProto
            {
                Name = layer.Name + "/dequantize",
                OpType = "DequantizeLinear",
                Input = { layer.WeightName + "_quantized", layer.WeightName + "_scale", layer.WeightName + "_zero_point" },
                Output = { layer.WeightName },
            };
            if (perAxis)
            {
                node.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = q.Axis });
            }

            dequantizers.Add(node);
        }

        ActivationQdq.Insert(graph, quantizedActivations, switched: false);

        // Inputs are initializers, so the new nodes can lead the topologically sorted node list.
        for (var i = dequantizers.Count - 1; i >= 0; i--)
        {
            graph.Node.Insert(0, dequantizers[i]);
        }

        // A table tied to an output MatMul is a Gather layer that a MatMul also reads: look at the readers, not the op.
        var integerWeights = model.Layers.Where(l => assignment.TryGetValue(l.Name, out var s) && BitWidths.IsInteger(s.Bits)).Select(l => l.WeightName).ToHashSet(StringComparer.Ordinal);
        var quantizedMatMul = ModelChecks.AllGraphs(graph).SelectMany(g => g.Node).Any(n => n.OpType == "MatMul" && n.Input.Any(integerWeights.Contains));
        return new ExportedModel(proto.ToByteArray(), "qdq", model.Opset, quantizedMatMul ? MatMulNote : null);
    }

    /// <summary>The integer type a setting is stored in at a given opset.</summary>
    public static TensorProto.Types.DataType StorageType(LayerSetting setting, long opset)
    {
        var signed = setting.Scheme == QuantizationScheme.Symmetric;
        if (setting.Bits <= 4 && opset >= Int4Opset)
        {
            return signed ? TensorProto.Types.DataType.Int4 : TensorProto.Types.DataType.Uint4;
        }

        return signed ? TensorProto.Types.DataType.Int8 : TensorProto.Types.DataType.Uint8;
    }

    private static float[] Snap(OnnxModel model, string layerName, LayerSetting setting)
    {
        var layer = model.Layers.First(l => l.Name == layerName);
        var weight = model.GetWeight(layer);
        var snapped = new float[weight.Length];
        WeightQuantizer.FakeQuantize(weight, layer.Shape, layer.ChannelAxis, setting, snapped);
        return snapped;
    }

    private static int FindInitializer(GraphProto graph, string name)
    {
        for (var i = 0; i < graph.Initializer.Count; i++)
        {
            if (graph.Initializer[i].Name == name)
            {
                return i;
            }
        }

        throw new InvalidOperationException($"The normalised model has no initializer '{name}'.");
    }

    private static TensorProto IntegerTensor(string name, IReadOnlyList<long> shape, ReadOnlySpan<int> values, TensorProto.Types.DataType type)
    {
        var tensor = new TensorProto { Name = name, DataType = (int)type };
        tensor.Dims.AddRange(shape);
        byte[] raw;
        if (type is TensorProto.Types.DataType.Int4 or TensorProto.Types.DataType.Uint4)
        {
            // ONNX packs 4-bit values two to a byte, the first element in the low nibble.
            raw = new byte[(values.Length + 1) / 2];
            for (var i = 0; i < values.Length; i++)
            {
                var nibble = (byte)(values[i] & 0x0F);
                raw[i / 2] |= (byte)((i & 1) == 0 ? nibble : nibble << 4);
            }
        }
        else
        {
            raw = new byte[values.Length];
            for (var i = 0; i < values.Length; i++)
            {
                raw[i] = unchecked((byte)values[i]);
            }
        }

        tensor.RawData = ByteString.CopyFrom(raw);
        return tensor;
    }

    private static TensorProto HalfTensor(string name, IReadOnlyList<long> shape, ReadOnlySpan<float> values)
    {
        var tensor = new TensorProto { Name = name, DataType = (int)TensorProto.Types.DataType.Float16 };
        tensor.Dims.AddRange(shape);
        var raw = new byte[values.Length * 2];
        for (var i = 0; i < values.Length; i++)
        {
            BitConverter.TryWriteBytes(raw.AsSpan(i * 2), BitConverter.HalfToUInt16Bits((Half)values[i]));
        }

        tensor.RawData = ByteString.CopyFrom(raw);
        return tensor;
    }

    private static NodeProto CastToFloat(WeightLayer layer) => new()
    {
        Name = layer.Name + "/to_float",
        OpType = "Cast",
        Input = { layer.WeightName + "_fp16" },
        Output = { layer.WeightName },
        Attribute = { new AttributeProto { Name = "to", Type = AttributeProto.Types.AttributeType.Int, I = (long)TensorProto.Types.DataType.Float } },
    };
}
