using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// How one layer's weight is written into the model file at the model's opset, as initializers and the
/// standard-operator nodes that turn them back into the FP32 weight the layer reads. The one place that
/// decides the written form, so the cost model can count exactly what the export writes:
/// <list type="bullet">
/// <item>opset 13 and later, and per-tensor from opset 10: DequantizeLinear (per-axis from 13), int4/uint4
/// from opset 21 for 2-4 bits, int8/uint8 otherwise;</item>
/// <item>per-channel at opsets 10-12 and everything at opset 9, which have no per-axis DequantizeLinear (or none
/// at all): Cast to float, Sub of the zero point (asymmetric), Mul by the scale shaped to broadcast on the layer's
/// channel axis. (q - z) is exact in FP32 for 8-bit integers, so the product equals s (q - z) bit for bit.</item>
/// </list>
/// Symmetric weights write no zero point: DequantizeLinear's default is 0 (ONNX operator spec).
/// </summary>
internal static class WeightStorage
{
    /// <summary>First opset with DequantizeLinear.</summary>
    public const long DequantizeOpset = 10;

    /// <summary>First opset with the axis attribute of DequantizeLinear.</summary>
    public const long PerAxisOpset = 13;

    /// <summary>First opset with INT4/UINT4.</summary>
    public const long Int4Opset = 21;

    /// <summary>Form of a weight written through DequantizeLinear.</summary>
    public const string DequantizeForm = "dequantize-linear";

    /// <summary>Form of a weight written as integers that Cast, Sub and Mul turn into FP32.</summary>
    public const string ScaleMultiplyForm = "cast-multiply";

    /// <summary>Form of a weight written as FP16 with a Cast.</summary>
    public const string HalfForm = "float16-cast";

    /// <summary>The form a setting is written in at an opset.</summary>
    public static string FormOf(LayerSetting setting, long opset) =>
        setting.Bits == BitWidths.Float16 ? HalfForm
        : UsesDequantizeLinear(setting, opset) ? DequantizeForm
        : ScaleMultiplyForm;

    /// <summary>True when an integer setting is written through DequantizeLinear at the opset.</summary>
    public static bool UsesDequantizeLinear(LayerSetting setting, long opset) =>
        opset >= PerAxisOpset || (opset >= DequantizeOpset && setting.Granularity == Granularity.PerTensor);

    /// <summary>The integer type a setting is stored in at an opset: 4-bit types for 2-4 bits from opset 21, one byte otherwise.</summary>
    public static TensorProto.Types.DataType IntegerType(LayerSetting setting, long opset)
    {
        var signed = setting.Scheme == QuantizationScheme.Symmetric;
        if (setting.Bits <= 4 && opset >= Int4Opset)
        {
            return signed ? TensorProto.Types.DataType.Int4 : TensorProto.Types.DataType.Uint4;
        }

        return signed ? TensorProto.Types.DataType.Int8 : TensorProto.Types.DataType.Uint8;
    }

    /// <summary>
    /// True when an int8 weight is stored as uint8 instead (zero point 128, same values) because its layer's input
    /// activation is quantized too: ONNX Runtime then fuses the QDQ pairs into integer kernels, and on x86 CPUs
    /// without VNNI its uint8 x int8 kernel sums pairs of products in 16 bits and saturates (measured: relative
    /// MSE 1.05e-3 against the trial on an AVX2-only EPYC) while its uint8 x uint8 kernel widens first and
    /// matches the trial to 1e-14. The unsigned form writes a zero point the signed one does not.
    /// </summary>
    public static bool StoresUnsigned(LayerSetting setting, long opset, bool activationQuantized) =>
        activationQuantized && BitWidths.IsInteger(setting.Bits) && IntegerType(setting, opset) == TensorProto.Types.DataType.Int8;

    /// <summary>Bits one stored element of the setting's container takes in the file (4, 8, 16 or 32).</summary>
    public static int ContainerBits(LayerSetting setting, long opset) =>
        setting.Bits is BitWidths.Float16 or BitWidths.Float32 ? setting.Bits
        : IntegerType(setting, opset) is TensorProto.Types.DataType.Int4 or TensorProto.Types.DataType.Uint4 ? 4
        : 8;

    /// <summary>The initializers and nodes that write a quantized weight (2..8 bits).</summary>
    public static StoredWeight Integer(WeightLayer layer, QuantizedWeight q, long opset)
    {
        var setting = new LayerSetting(q.Bits, q.Scheme, q.Axis >= 0 ? Granularity.PerChannel : Granularity.PerTensor);
        var type = IntegerType(setting, opset);
        var stem = layer.WeightName;
        var initializers = new List<TensorProto> { IntegerTensor(DerivedNames.Of(stem, "levels"), layer.Shape, q.Levels, type) };
        var nodes = new List<NodeProto>();
        var asymmetric = q.Scheme == QuantizationScheme.Asymmetric;
        if (UsesDequantizeLinear(setting, opset))
        {
            long[] paramShape = q.Axis >= 0 ? [q.Scales.Length] : [];
            initializers.Add(FloatTensor(DerivedNames.Of(stem, "scale"), paramShape, q.Scales));
            var node = new NodeProto { Name = layer.Name + "/dequantize", OpType = "DequantizeLinear", Input = { DerivedNames.Of(stem, "levels"), DerivedNames.Of(stem, "scale") }, Output = { stem } };
            if (asymmetric)
            {
                initializers.Add(IntegerTensor(DerivedNames.Of(stem, "zero-point"), paramShape, q.ZeroPoints, type));
                node.Input.Add(DerivedNames.Of(stem, "zero-point"));
            }

            if (q.Axis >= 0)
            {
                node.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = q.Axis });
            }

            nodes.Add(node);
            return new StoredWeight(initializers, nodes, DequantizeForm);
        }

        // One scale (and zero point) per channel, shaped [1, .., C, .., 1] so Mul and Sub broadcast on the channel axis.
        var broadcast = q.Axis < 0 ? [] : layer.Shape.Select((d, i) => i == q.Axis ? d : 1).ToArray();
        initializers.Add(FloatTensor(DerivedNames.Of(stem, "scale"), broadcast, q.Scales));
        nodes.Add(ToFloat(layer.Name + "/levels", DerivedNames.Of(stem, "levels"), DerivedNames.Of(stem, "levels-float")));
        var centered = DerivedNames.Of(stem, "levels-float");
        if (asymmetric)
        {
            initializers.Add(IntegerTensor(DerivedNames.Of(stem, "zero-point"), broadcast, q.ZeroPoints, type));
            nodes.Add(ToFloat(layer.Name + "/zero_point", DerivedNames.Of(stem, "zero-point"), DerivedNames.Of(stem, "zero-point-float")));
            nodes.Add(new NodeProto { Name = layer.Name + "/center", OpType = "Sub", Input = { DerivedNames.Of(stem, "levels-float"), DerivedNames.Of(stem, "zero-point-float") }, Output = { DerivedNames.Of(stem, "centered") } });
            centered = DerivedNames.Of(stem, "centered");
        }

        nodes.Add(new NodeProto { Name = layer.Name + "/scale", OpType = "Mul", Input = { centered, DerivedNames.Of(stem, "scale") }, Output = { stem } });
        return new StoredWeight(initializers, nodes, ScaleMultiplyForm);
    }

    /// <summary>The FP16 initializer and the Cast that writes a weight as half precision.</summary>
    public static StoredWeight Half(WeightLayer layer, ReadOnlySpan<float> weight)
    {
        var tensor = new TensorProto { Name = DerivedNames.Of(layer.WeightName, "half"), DataType = (int)TensorProto.Types.DataType.Float16 };
        tensor.Dims.AddRange(layer.Shape);
        var raw = new byte[weight.Length * 2];
        for (var i = 0; i < weight.Length; i++)
        {
            BitConverter.TryWriteBytes(raw.AsSpan(i * 2), BitConverter.HalfToUInt16Bits((Half)weight[i]));
        }

        tensor.RawData = UnsafeByteOperations.UnsafeWrap(raw);
        return new StoredWeight([tensor], [ToFloat(layer.Name + "/to_float", tensor.Name, layer.WeightName)], HalfForm);
    }

    /// <summary>
    /// Bytes the layer's weight takes in the file under a setting: its initializers and nodes as serialized
    /// entries of the graph. Built on placeholder values; the sizes do not depend on the values.
    /// </summary>
    public static long FileBytes(WeightLayer layer, LayerSetting setting, long opset, bool activationQuantized = false)
    {
        if (StoresUnsigned(setting, opset, activationQuantized))
        {
            setting = setting with { Scheme = QuantizationScheme.Asymmetric };
        }

        var count = checked((int)layer.ParameterCount);
        if (setting.Bits == BitWidths.Float16)
        {
            return Half(layer, new float[count]).SerializedBytes;
        }

        var channels = setting.Granularity == Granularity.PerChannel ? checked((int)layer.Channels) : 1;
        var placeholder = new QuantizedWeight(
            setting.Bits,
            setting.Scheme,
            setting.Granularity == Granularity.PerChannel ? layer.ChannelAxis : -1,
            new float[channels],
            new int[channels],
            new int[count]);
        return Integer(layer, placeholder, opset).SerializedBytes;
    }

    /// <summary>Bytes one tensor takes as an entry of a repeated message field (tag, length and message).</summary>
    public static long EntryBytes(IMessage message) => 1 + CodedOutputStream.ComputeMessageSize(message);

    private static NodeProto ToFloat(string name, string input, string output) => new()
    {
        Name = name,
        OpType = "Cast",
        Input = { input },
        Output = { output },
        Attribute = { new AttributeProto { Name = "to", Type = AttributeProto.Types.AttributeType.Int, I = (long)TensorProto.Types.DataType.Float } },
    };

    private static TensorProto FloatTensor(string name, IReadOnlyList<long> shape, float[] values)
    {
        var tensor = new TensorProto { Name = name, DataType = (int)TensorProto.Types.DataType.Float };
        tensor.Dims.AddRange(shape);
        tensor.FloatData.AddRange(values);
        return tensor;
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

        tensor.RawData = UnsafeByteOperations.UnsafeWrap(raw);
        return tensor;
    }
}
