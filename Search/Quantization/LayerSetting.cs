namespace Bitbudget.Search.Quantization;

/// <summary>How one layer's weight is stored: bit width, scheme, granularity, clipping and how values are rounded to the grid.</summary>
/// <param name="Bits">2..8, <see cref="BitWidths.Float16"/> or <see cref="BitWidths.Float32"/>.</param>
/// <param name="Percentile">Used by <see cref="ClipMethod.Percentile"/> only, in percent (e.g. 99.99).</param>
/// <param name="Rounding">How values go to the grid's integers; the grid (scale, zero point) is the same either way.</param>
/// <param name="BiasCorrection">Whether the layer's bias is corrected for the quantized weight's mean output shift
/// (<see cref="Quantization.BiasCorrection"/>); integer widths only, and only where the layer has a bias site.</param>
public sealed record LayerSetting(
    int Bits,
    QuantizationScheme Scheme = QuantizationScheme.Symmetric,
    Granularity Granularity = Granularity.PerChannel,
    ClipMethod Clip = ClipMethod.MinMax,
    double Percentile = 99.99,
    RoundingMethod Rounding = RoundingMethod.Nearest,
    bool BiasCorrection = false)
{
    /// <summary>The setting that leaves a weight untouched.</summary>
    public static LayerSetting KeepFloat32 { get; } = new(BitWidths.Float32);
}
