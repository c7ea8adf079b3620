namespace Bitbudget.Search.Planning;

/// <summary>How the size of a quantized weight is counted.</summary>
public enum StorageRule
{
    /// <summary>
    /// What the export writes at the model's opset: 2-8 bit weights in one byte each (int8/uint8), 2-4 bits in
    /// half a byte from opset 21 (int4/uint4), FP16 in two bytes, plus scales, zero points and the graph's nodes.
    /// </summary>
    Container,

    /// <summary>
    /// Ideal packed bits: a b-bit weight counts b bits, for targets that pack sub-byte widths themselves.
    /// The written ONNX file is still stored in containers, so it is larger than this count.
    /// </summary>
    Packed,
}
