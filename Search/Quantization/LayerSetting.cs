namespace Bitbudget.Search.Quantization;

/// <summary>How one layer's weight is stored: bit width, scheme, granularity and clipping.</summary>
/// <param name="Bits">2..8, <see cref="BitWidths.Float16"/> or <see cref="BitWidths.Float32"/>.</param>
/// <param name="Percentile">Used by <see cref="ClipMethod.Percentile"/> only, in percent (e.g. 99.99).</param>
public sealed record LayerSetting(
    int Bits,
    QuantizationScheme Scheme = QuantizationScheme.Symmetric,
    Granularity Granularity = Granularity.PerChannel,
    ClipMethod Clip = ClipMethod.MinMax,
    double Percentile = 99.99)
{
    /// <summary>The setting that leaves a weight untouched.</summary>
    public static LayerSetting KeepFloat32 { get; } = new(BitWidths.Float32);
}
