using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>One planned sensitivity trial: one layer at one setting, every other layer FP32.</summary>
/// <param name="Key">Stable key (layer, bits, scheme, granularity, clip) under which the trial is stored.</param>
/// <param name="Activations">How the layer's input activation is quantized alongside; null when activations stay FP32.</param>
public sealed record SweepTrial(string Key, WeightLayer Layer, LayerSetting Setting, ActivationCalibration? Activations = null);
