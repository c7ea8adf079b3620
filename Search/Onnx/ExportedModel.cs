namespace Bitbudget.Search.Onnx;

/// <summary>A quantized model ready to download.</summary>
/// <param name="Bytes">The serialized ONNX model.</param>
/// <param name="Format">"qdq": integer weight initializers with DequantizeLinear; "fake-quantized": FP32 weights snapped to the grid.</param>
/// <param name="Opset">The model's opset (never raised by the export).</param>
/// <param name="Note">Why the format is what it is, when that is not plain QDQ; null otherwise.</param>
public sealed record ExportedModel(byte[] Bytes, string Format, long Opset, string? Note);
