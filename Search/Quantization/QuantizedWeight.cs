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
    int[] Levels);
