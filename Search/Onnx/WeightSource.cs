using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Where a consumer's weight input really comes from: the constant at the end of a chain of
/// Identity/Cast nodes. <see cref="Chain"/> lists the value names from the one the consumer reads
/// down to the constant itself.
/// </summary>
internal sealed record WeightSource(GraphScope Scope, string ConstantName, P.TensorProto Tensor, IReadOnlyList<string> Chain, IReadOnlyList<int> CastsOutward)
{
    /// <summary>Element type the consumer sees: the type of the last Cast, or the constant's own type.</summary>
    public int ConsumedType => CastsOutward.Count > 0 ? CastsOutward[^1] : Tensor.DataType;

    /// <summary>FP32 values as the consumer sees them (rounding through every intermediate cast).</summary>
    public float[] ReadFloats()
    {
        var values = TensorCodec.ToFloats(Tensor);
        foreach (var to in CastsOutward)
        {
            if ((P.TensorProto.Types.DataType)to == P.TensorProto.Types.DataType.Float16)
            {
                for (var i = 0; i < values.Length; i++)
                {
                    values[i] = (float)(Half)values[i];
                }
            }
        }

        return values;
    }
}
