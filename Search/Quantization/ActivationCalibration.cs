namespace Bitbudget.Search.Quantization;

/// <summary>How the clipping range of an 8-bit activation is chosen from the calibration set.</summary>
public enum ActivationCalibration
{
    /// <summary>The smallest and largest value the tensor takes over the calibration set.</summary>
    MinMax,

    /// <summary>The <see cref="ActivationQuantization.Percentile"/> and its mirror percentile of the tensor's values.</summary>
    Percentile,
}
