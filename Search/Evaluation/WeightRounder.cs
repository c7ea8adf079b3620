using System.Collections.Concurrent;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// The one place a layer's stored integers come from, for trials and the export alike, so the exported model holds
/// exactly the integers that were measured. Nearest rounding needs nothing but the weight; compensated rounding also
/// needs the layer's input moments (<see cref="LayerInputCollector"/>), and a layer without them is rounded to nearest.
/// The Cholesky factors (one per layer, whatever the width) and the compensated integers are computed once and kept.
/// </summary>
public sealed class WeightRounder
{
    private readonly OnnxModel _model;
    private readonly IReadOnlyDictionary<string, LayerInputs> _inputs;
    private readonly ConcurrentDictionary<string, double[][]> _factors = new(StringComparer.Ordinal);
    private readonly ConcurrentDictionary<string, QuantizedWeight> _compensated = new(StringComparer.Ordinal);

    public WeightRounder(OnnxModel model, IReadOnlyDictionary<string, LayerInputs> inputs)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(inputs);
        _model = model;
        _inputs = inputs;
    }

    /// <summary>Layers whose input moments were gathered, by name.</summary>
    public IReadOnlyDictionary<string, LayerInputs> Inputs => _inputs;

    /// <summary>True when <paramref name="layer"/> can be rounded with compensation (its inputs were gathered).</summary>
    public bool Compensates(string layer) => _inputs.ContainsKey(layer);

    /// <summary>The rounding <paramref name="setting"/> really gets for <paramref name="layer"/>: compensated falls back to nearest without inputs.</summary>
    public RoundingMethod RoundingFor(string layer, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(setting);
        return setting.Rounding == RoundingMethod.Compensated && Compensates(layer) ? RoundingMethod.Compensated : RoundingMethod.Nearest;
    }

    /// <summary>The integers of <paramref name="layer"/> stored as <paramref name="setting"/> says (2..8 bits).</summary>
    public QuantizedWeight Quantize(WeightLayer layer, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(setting);
        if (RoundingFor(layer.Name, setting) == RoundingMethod.Nearest)
        {
            return WeightQuantizer.Quantize(_model.GetWeight(layer), layer.Shape, layer.ChannelAxis, setting with { Rounding = RoundingMethod.Nearest });
        }

        return _compensated.GetOrAdd(layer.Name + "/" + Planning.TrialKeys.Describe(setting), _ =>
        {
            var inputs = _inputs[layer.Name];
            var factors = _factors.GetOrAdd(layer.Name, _ => CompensatedRounding.Factors(inputs.Moments));
            return CompensatedRounding.Round(_model.GetWeight(layer), layer.Shape, layer.ChannelAxis, setting, inputs.Layout, inputs.Moments, factors);
        });
    }

    /// <summary>The weight as <paramref name="setting"/> stores it, back in FP32: s (q − z), the nearest half, or the FP32 weight.</summary>
    public float[] Dequantized(WeightLayer layer, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(setting);
        var result = new float[layer.ParameterCount];
        if (RoundingFor(layer.Name, setting) == RoundingMethod.Nearest || !BitWidths.IsInteger(setting.Bits))
        {
            WeightQuantizer.FakeQuantize(_model.GetWeight(layer), layer.Shape, layer.ChannelAxis, setting with { Rounding = RoundingMethod.Nearest }, result);
            return result;
        }

        WeightQuantizer.Dequantize(Quantize(layer, setting), layer.Shape, result);
        return result;
    }
}
