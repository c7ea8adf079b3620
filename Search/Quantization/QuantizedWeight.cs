namespace Bitbudget.Search.Quantization;

/// <summary>
/// A weight stored on an integer grid: w~ = Scales[c] * (Levels[i] - ZeroPoints[c]).
/// </summary>
/// <param name="Bits">Integer bit width, 2..8.</param>
/// <param name="Axis">-1 for per-tensor (one scale and zero point), else the channel axis of the weight's shape.</param>
/// <param name="Scales">One scale per channel (one in all for per-tensor).</param>
/// <param name="ZeroPoints">One zero point per channel; all 0 for the symmetric scheme.</param>
/// <param name="Levels">The integers, in the C (row-major) order of the weight.</param>
public sealed record QuantizedWeight(
    int Bits,
    QuantizationScheme Scheme,
    int Axis,
    float[] Scales,
    int[] ZeroPoints,
    int[] Levels)
{
    /// <summary>
    /// The same dequantized values on the uint8 grid: levels and zero points moved up by 128, so
    /// s * ((q + 128) - (z + 128)) = s * (q - z). Used where a runtime's int8 kernel is less exact than its
    /// uint8 one (see <see cref="Onnx.QdqExporter"/>). The result is affine (a non-zero zero point), so it is
    /// stored as uint8 with its zero points like any asymmetric weight.
    /// </summary>
    public QuantizedWeight ShiftedToUnsigned() => this with
    {
        Scheme = QuantizationScheme.Asymmetric,
        ZeroPoints = Array.ConvertAll(ZeroPoints, z => z + 128),
        Levels = Array.ConvertAll(Levels, q => q + 128),
    };
}
