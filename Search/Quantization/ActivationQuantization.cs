namespace Bitbudget.Search.Quantization;

/// <summary>
/// Per-tensor asymmetric 8-bit quantization of one layer's activation input: the tensor
/// <paramref name="Tensor"/> that node <paramref name="Consumer"/> (a consumer of layer
/// <paramref name="Layer"/>) reads as its input 0, stored as uint8 with <paramref name="Scale"/>
/// and <paramref name="ZeroPoint"/>.
/// </summary>
public sealed record ActivationQuantization(string Layer, string Consumer, string Tensor, float Scale, int ZeroPoint)
{
    /// <summary>Activations are always 8 bits (uint8 in QDQ form).</summary>
    public const int Bits = 8;

    /// <summary>The percentile the <see cref="ActivationCalibration.Percentile"/> calibration clips at (the weights' default).</summary>
    public const double Percentile = 99.99;

    /// <summary>
    /// First opset where the engine quantizes activations. QuantizeLinear exists from opset 10, but the
    /// issue that asked for activations fixes 13 (the opset whose QuantizeLinear/DequantizeLinear carry
    /// the axis attribute the weights may need next to them).
    /// </summary>
    public const long MinimumOpset = 13;

    /// <summary>The sentence given when a model's opset is too old for activation QDQ.</summary>
    public static string OpsetMessage(long opset) =>
        $"Quantizing activations writes QuantizeLinear/DequantizeLinear on them, which needs opset {MinimumOpset}; the model's opset is {opset} " +
        "and it is never raised (other operators change meaning across versions). Search weights only, or export the model again at opset 13 or later.";

    /// <summary>
    /// Scale and zero point of the uint8 grid for a clipping range; the range is widened to contain 0 so
    /// that real zero is exactly representable (ReLU outputs and padding stay exact).
    /// </summary>
    public static (float Scale, int ZeroPoint) ParametersFor(ClipRange range) =>
        AffineParameters.From(range, Bits, QuantizationScheme.Asymmetric);

    /// <summary>The clipping range of a whole tensor's values over the calibration set.</summary>
    public static ClipRange RangeOf(ReadOnlySpan<float> values, ActivationCalibration calibration)
    {
        var clip = calibration == ActivationCalibration.Percentile ? ClipMethod.Percentile : ClipMethod.MinMax;
        return ClipCalibrator.Calibrate(values, new LayerSetting(Bits, QuantizationScheme.Asymmetric, Granularity.PerTensor, clip, Percentile));
    }
}
