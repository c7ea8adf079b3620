namespace Bitbudget.Search.Quantization;

/// <summary>How the clipping range of a channel (or tensor) is chosen ("calibration" of weights).</summary>
public enum ClipMethod
{
    /// <summary>The observed minimum and maximum.</summary>
    MinMax,

    /// <summary>A high percentile of the magnitudes (<see cref="LayerSetting.Percentile"/>).</summary>
    Percentile,

    /// <summary>The clip that minimises the squared error of the quantized values, found by search.</summary>
    MseOptimal,

    /// <summary>Banner et al. (2019) analytic clip for Laplace-shaped weights.</summary>
    AnalyticLaplace,

    /// <summary>Banner et al. (2019) analytic clip for Gaussian-shaped weights.</summary>
    AnalyticGaussian,
}
