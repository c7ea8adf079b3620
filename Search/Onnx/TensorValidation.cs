using System.Globalization;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Checks every tensor a model carries (initializers, sparse initializers, tensor attributes of any node in
/// any graph) before anything reads its values: dimensions not negative, an element count that does not
/// overflow, exactly as many data entries as the dimensions need for the element type, and no name
/// given to two initializers of one graph. A tensor that fails is named in an <see cref="EngineException"/>
/// with code <c>model-invalid</c>, so a damaged or hostile file never reaches arithmetic that could throw
/// something else or silently compute with zero elements.
/// </summary>
internal static class TensorValidation
{
    /// <summary>Most elements one tensor may claim; a float[] of the weights must fit one .NET array.</summary>
    public static readonly long MaxElements = Array.MaxLength;

    public static void Check(P.ModelProto model)
    {
        foreach (var graph in ModelChecks.AllGraphs(model.Graph))
        {
            var names = new HashSet<string>(StringComparer.Ordinal);
            foreach (var tensor in graph.Initializer)
            {
                CheckTensor(tensor, $"initializer '{tensor.Name}'");
                if (!names.Add(tensor.Name))
                {
                    throw Invalid($"two initializers of graph '{graph.Name}' are both named '{tensor.Name}'");
                }
            }

            foreach (var sparse in graph.SparseInitializer)
            {
                CheckSparse(sparse, $"sparse initializer '{sparse.Values?.Name}'");
            }

            foreach (var node in graph.Node)
            {
                var label = ModelChecks.Label(node);
                foreach (var attribute in node.Attribute)
                {
                    if (attribute.T is { } tensor)
                    {
                        CheckTensor(tensor, $"attribute '{attribute.Name}' of node '{label}'");
                    }

                    for (var i = 0; i < attribute.Tensors.Count; i++)
                    {
                        CheckTensor(attribute.Tensors[i], $"tensor {i.ToString(CultureInfo.InvariantCulture)} of attribute '{attribute.Name}' of node '{label}'");
                    }

                    if (attribute.SparseTensor is { } sparseTensor)
                    {
                        CheckSparse(sparseTensor, $"sparse attribute '{attribute.Name}' of node '{label}'");
                    }
                }
            }
        }
    }

    /// <summary>Product of the dimensions, refused when one is negative or the product passes <see cref="MaxElements"/>.</summary>
    public static long CheckedElementCount(IReadOnlyList<long> dims, string what)
    {
        long count = 1;
        foreach (var d in dims)
        {
            if (d < 0)
            {
                throw Invalid($"{what} has a negative dimension ({d.ToString(CultureInfo.InvariantCulture)}) in its shape {Shape(dims)}");
            }

            // Compare before multiplying, so the product can never wrap (dims [2^32, 2^32] would wrap to 0).
            if (d != 0 && count > MaxElements / d)
            {
                throw Invalid($"{what} has shape {Shape(dims)}, more than the {MaxElements.ToString(CultureInfo.InvariantCulture)} elements one tensor may hold");
            }

            count *= d;
        }

        return count;
    }

    private static void CheckSparse(P.SparseTensorProto sparse, string what)
    {
        // Found by the fuzz run: a sparse initializer without values made the normaliser dereference null.
        if (sparse.Values is null || sparse.Indices is null)
        {
            throw Invalid($"{what} has no {(sparse.Values is null ? "values" : "indices")} tensor, which ONNX requires of a sparse tensor");
        }

        CheckedElementCount(sparse.Dims, what);
        CheckTensor(sparse.Values, what + " (values)");
        CheckTensor(sparse.Indices, what + " (indices)");
    }

    private static void CheckTensor(P.TensorProto tensor, string what)
    {
        var count = CheckedElementCount(tensor.Dims, what);
        if (TensorCodec.IsExternal(tensor))
        {
            // Refused on its own, with its own code, by ModelChecks.RefuseExternalData.
            return;
        }

        var type = tensor.DataType;
        var bits = BitsPerElement(type);
        if (bits is null)
        {
            throw Invalid($"{what} has element type {type.ToString(CultureInfo.InvariantCulture)}, which ONNX does not define");
        }

        if (!tensor.RawData.IsEmpty)
        {
            if (type == (int)P.TensorProto.Types.DataType.String)
            {
                throw Invalid($"{what} is a STRING tensor with raw_data; ONNX keeps strings in string_data");
            }

            // raw_data packs 4-bit elements two to a byte (onnx.proto, TensorProto.raw_data).
            var needed = (count * bits.Value + 7) / 8;
            if (tensor.RawData.Length != needed)
            {
                throw Invalid(
                    $"{what} ({TensorCodec.TypeName(type)}, shape {Shape(tensor.Dims)}) holds {tensor.RawData.Length.ToString(CultureInfo.InvariantCulture)} bytes of raw data where its shape needs {needed.ToString(CultureInfo.InvariantCulture)}");
            }

            return;
        }

        var (field, entries) = TypedEntries(tensor);
        var perElement = type is (int)P.TensorProto.Types.DataType.Complex64 or (int)P.TensorProto.Types.DataType.Complex128 ? 2 : 1;
        var expected = count * perElement;
        // 4-bit values may be packed two per int32_data entry (onnx.proto, from memory) or stored one per entry.
        var packedOk = bits == 4 && entries == (count + 1) / 2;
        if (entries != expected && !packedOk)
        {
            throw Invalid(
                $"{what} ({TensorCodec.TypeName(type)}, shape {Shape(tensor.Dims)}) holds {entries.ToString(CultureInfo.InvariantCulture)} entries in {field} where its shape needs {expected.ToString(CultureInfo.InvariantCulture)}");
        }
    }

    /// <summary>The typed field ONNX keeps an element type in (onnx.proto, TensorProto) and how many entries it holds.</summary>
    private static (string Field, long Entries) TypedEntries(P.TensorProto tensor) => (P.TensorProto.Types.DataType)tensor.DataType switch
    {
        P.TensorProto.Types.DataType.Float or P.TensorProto.Types.DataType.Complex64 => ("float_data", tensor.FloatData.Count),
        P.TensorProto.Types.DataType.Double or P.TensorProto.Types.DataType.Complex128 => ("double_data", tensor.DoubleData.Count),
        P.TensorProto.Types.DataType.Int64 => ("int64_data", tensor.Int64Data.Count),
        P.TensorProto.Types.DataType.Uint32 or P.TensorProto.Types.DataType.Uint64 => ("uint64_data", tensor.Uint64Data.Count),
        P.TensorProto.Types.DataType.String => ("string_data", tensor.StringData.Count),
        _ => ("int32_data", tensor.Int32Data.Count),
    };

    /// <summary>Storage bits of one element of each ONNX data type (onnx.proto, TensorProto.DataType); null for UNDEFINED or unknown.</summary>
    private static int? BitsPerElement(int dataType) => dataType switch
    {
        1 or 6 or 12 => 32, // FLOAT, INT32, UINT32
        2 or 3 or 9 => 8, // UINT8, INT8, BOOL
        4 or 5 or 10 or 16 => 16, // UINT16, INT16, FLOAT16, BFLOAT16
        7 or 11 or 13 or 14 => 64, // INT64, DOUBLE, UINT64, COMPLEX64
        15 => 128, // COMPLEX128
        8 => 8, // STRING: only string_data, checked by entry count
        >= 17 and <= 20 => 8, // FLOAT8E4M3FN, FLOAT8E4M3FNUZ, FLOAT8E5M2, FLOAT8E5M2FNUZ
        21 or 22 or 23 => 4, // UINT4, INT4, FLOAT4E2M1
        _ => null,
    };

    private static string Shape(IEnumerable<long> dims) => "[" + string.Join(", ", dims.Select(d => d.ToString(CultureInfo.InvariantCulture))) + "]";

    private static EngineException Invalid(string what) =>
        new("model-invalid", $"The model is invalid: {what}; re-export the model.");
}
