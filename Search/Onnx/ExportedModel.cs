namespace Bitbudget.Search.Onnx;

/// <summary>A quantized model ready to download.</summary>
/// <param name="Bytes">The serialized ONNX model.</param>
/// <param name="Format">"qdq": integer weight initializers turned into FP32 by standard operators (see <see cref="WeightStorage"/>).</param>
/// <param name="Opset">The model's opset (never raised by the export).</param>
/// <param name="Note">Why the format is what it is, when that is not plain QDQ; null otherwise.</param>
public sealed record ExportedModel(byte[] Bytes, string Format, long Opset, string? Note)
{
    /// <summary>Size of the written model file, in bytes.</summary>
    public long FileBytes => Bytes.LongLength;
}
