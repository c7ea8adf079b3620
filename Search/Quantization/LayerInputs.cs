namespace Bitbudget.Search.Quantization;

/// <summary>A layer's weight as a linear map and the moments of its inputs on the calibration set.</summary>
public sealed record LayerInputs(LinearLayout Layout, InputMoments Moments);
