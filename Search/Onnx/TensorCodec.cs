using System.Runtime.InteropServices;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>Reads and writes the numeric payload of ONNX tensors (raw little-endian bytes or typed fields).</summary>
internal static class TensorCodec
{
    public static bool IsExternal(P.TensorProto tensor) =>
        tensor.DataLocation == P.TensorProto.Types.DataLocation.External || tensor.ExternalData.Count > 0;

    public static long ElementCount(IEnumerable<long> dims)
    {
        long count = 1;
        foreach (var d in dims)
        {
            // TensorValidation has refused negative and overflowing shapes; checked keeps any other caller honest.
            count = checked(count * d);
        }

        return count;
    }

    public static P.TensorProto.Types.DataType TypeOf(P.TensorProto tensor) => (P.TensorProto.Types.DataType)tensor.DataType;

    public static string TypeName(int dataType) =>
        ((P.TensorProto.Types.DataType)dataType).ToString().ToUpperInvariant();

    /// <summary>Integer element types that only appear as weights in a model that is already quantized.</summary>
    public static bool IsQuantizedInteger(int dataType) => (P.TensorProto.Types.DataType)dataType is
        P.TensorProto.Types.DataType.Int8 or P.TensorProto.Types.DataType.Uint8 or
        P.TensorProto.Types.DataType.Int4 or P.TensorProto.Types.DataType.Uint4 or
        P.TensorProto.Types.DataType.Int16 or P.TensorProto.Types.DataType.Uint16;

    /// <summary>Float element types a Cast to FLOAT turns into FP32 weights without surprise.</summary>
    public static bool IsCastableFloat(int dataType) => (P.TensorProto.Types.DataType)dataType is
        P.TensorProto.Types.DataType.Float or P.TensorProto.Types.DataType.Float16 or
        P.TensorProto.Types.DataType.Double or P.TensorProto.Types.DataType.Bfloat16;

    /// <summary>Decodes a FLOAT, FLOAT16, BFLOAT16 or DOUBLE tensor into FP32 values in C order.</summary>
    public static float[] ToFloats(P.TensorProto tensor)
    {
        var count = checked((int)ElementCount(tensor.Dims));
        var result = new float[count];
        var raw = tensor.RawData.Span;
        switch (TypeOf(tensor))
        {
            case P.TensorProto.Types.DataType.Float:
                if (!raw.IsEmpty)
                {
                    CheckLength(tensor, raw.Length, count * 4L);
                    MemoryMarshal.Cast<byte, float>(raw).CopyTo(result);
                }
                else
                {
                    CheckLength(tensor, tensor.FloatData.Count, count);
                    tensor.FloatData.CopyTo(result, 0);
                }

                break;
            case P.TensorProto.Types.DataType.Float16:
                if (!raw.IsEmpty)
                {
                    CheckLength(tensor, raw.Length, count * 2L);
                    var halves = MemoryMarshal.Cast<byte, Half>(raw);
                    for (var i = 0; i < count; i++)
                    {
                        result[i] = (float)halves[i];
                    }
                }
                else
                {
                    // FLOAT16 in the typed field: each int32 holds the 16 bits of one value (onnx.proto, TensorProto.int32_data).
                    CheckLength(tensor, tensor.Int32Data.Count, count);
                    for (var i = 0; i < count; i++)
                    {
                        result[i] = (float)BitConverter.UInt16BitsToHalf((ushort)tensor.Int32Data[i]);
                    }
                }

                break;
            case P.TensorProto.Types.DataType.Bfloat16:
                CheckLength(tensor, raw.IsEmpty ? tensor.Int32Data.Count : raw.Length, raw.IsEmpty ? count : count * 2L);
                for (var i = 0; i < count; i++)
                {
                    uint bits = raw.IsEmpty ? (ushort)tensor.Int32Data[i] : MemoryMarshal.Cast<byte, ushort>(raw)[i];
                    result[i] = BitConverter.UInt32BitsToSingle(bits << 16);
                }

                break;
            case P.TensorProto.Types.DataType.Double:
                if (!raw.IsEmpty)
                {
                    CheckLength(tensor, raw.Length, count * 8L);
                    var doubles = MemoryMarshal.Cast<byte, double>(raw);
                    for (var i = 0; i < count; i++)
                    {
                        result[i] = (float)doubles[i];
                    }
                }
                else
                {
                    CheckLength(tensor, tensor.DoubleData.Count, count);
                    for (var i = 0; i < count; i++)
                    {
                        result[i] = (float)tensor.DoubleData[i];
                    }
                }

                break;
            default:
                throw new EngineException(
                    "model-non-float-weights",
                    $"Tensor '{tensor.Name}' is {TypeName(tensor.DataType)}, not a floating-point type; export the model with FP32 weights.");
        }

        return result;
    }

    /// <summary>Builds an FP32 tensor with raw little-endian data, the layout ONNX Runtime reads fastest.</summary>
    public static P.TensorProto FromFloats(string name, IEnumerable<long> dims, ReadOnlySpan<float> values)
    {
        var tensor = new P.TensorProto { Name = name, DataType = (int)P.TensorProto.Types.DataType.Float };
        tensor.Dims.AddRange(dims);
        if (ElementCount(tensor.Dims) != values.Length)
        {
            throw new ArgumentException($"Tensor '{name}' needs {ElementCount(tensor.Dims)} values, got {values.Length}.", nameof(values));
        }

        tensor.RawData = ByteString.CopyFrom(MemoryMarshal.AsBytes(values));
        return tensor;
    }

    private static void CheckLength(P.TensorProto tensor, long actual, long expected)
    {
        if (actual != expected)
        {
            throw new EngineException(
                "model-invalid",
                $"Tensor '{tensor.Name}' holds {actual} data entries where its shape needs {expected}; the model file is damaged.");
        }
    }
}
