using System.Collections.Concurrent;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// The one place a layer's stored integers come from, for trials and the export alike, so the exported model holds
/// exactly the integers that were measured. Nearest rounding needs nothing but the weight; compensated rounding also
/// needs the layer's input moments (<see cref="LayerInputCollector"/>), and a layer without them is rounded to nearest.
/// The Cholesky factors (one per layer, whatever the width) and the compensated integers are computed once and kept.
/// It is also the one place a corrected bias comes from (<see cref="CorrectedBias"/>): trials feed it and the export
/// writes it, so the exported model holds exactly the bias that was measured.
/// </summary>
public sealed class WeightRounder
{
    private readonly OnnxModel _model;
    private readonly IReadOnlyDictionary<string, LayerInputs> _inputs;
    private readonly ConcurrentDictionary<string, double[][]> _factors = new(StringComparer.Ordinal);
    private readonly ConcurrentDictionary<string, QuantizedWeight> _compensated = new(StringComparer.Ordinal);
    private readonly ConcurrentDictionary<string, float[]> _biases = new(StringComparer.Ordinal);
    private readonly Dictionary<string, BiasSite> _biasSites = new(StringComparer.Ordinal);
    private readonly Dictionary<string, string> _uncorrected = new(StringComparer.Ordinal);

    /// <param name="correctBiases">Find each layer's bias site, so settings with bias correction get corrected biases.</param>
    public WeightRounder(OnnxModel model, IReadOnlyDictionary<string, LayerInputs> inputs, bool correctBiases = false)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(inputs);
        _model = model;
        _inputs = inputs;
        if (!correctBiases)
        {
            return;
        }

        foreach (var layer in model.Layers)
        {
            if (BiasSite.Find(model, layer, out var reason) is not { } site)
            {
                _uncorrected[layer.Name] = reason;
            }
            else if (!inputs.ContainsKey(layer.Name))
            {
                _uncorrected[layer.Name] = $"its inputs' mean was not gathered (inputs wider than {LayerInputCollector.MaxColumns} values, past the memory allowed, or not read as one linear map)";
            }
            else
            {
                _biasSites[layer.Name] = site;
            }
        }
    }

    /// <summary>
    /// The rounder a search builds for <paramref name="layers"/> (its searched layers): their input moments gathered in one
    /// FP32 pass over <paramref name="data"/> (Σ x x^T only with <paramref name="secondMoments"/>, for compensated rounding),
    /// bounded by <paramref name="maxBytes"/>, so a stored trial can be run again with the very integers and biases it measured.
    /// </summary>
    public static WeightRounder Gather(
        OnnxModel model, CalibrationSet data, IReadOnlyList<WeightLayer> layers, bool secondMoments, bool correctBiases, int maxBatch, long maxBytes, CancellationToken cancellationToken = default) =>
        new(model, LayerInputCollector.Collect(model, data, layers, maxBatch, maxBytes, cancellationToken, secondMoments), correctBiases);

    /// <summary>Layers bias correction cannot apply to, with the reason (a sentence fragment); empty when it was not asked for.</summary>
    public IReadOnlyDictionary<string, string> UncorrectedBiases => _uncorrected;

    /// <summary>The bias sites of the layers whose biases are corrected, by layer name.</summary>
    internal IReadOnlyDictionary<string, BiasSite> BiasSites => _biasSites;

    /// <summary>
    /// The bias <paramref name="layer"/> runs with under <paramref name="setting"/>: its own plus the bias correction
    /// shift of the stored weight (Nagel et al. 2019), or null when the setting does not correct it or the layer has
    /// no bias site. Computed once per layer and setting.
    /// </summary>
    public float[]? CorrectedBias(WeightLayer layer, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(setting);
        if (!setting.BiasCorrection || !BitWidths.IsInteger(setting.Bits) || !_biasSites.TryGetValue(layer.Name, out var site))
        {
            return null;
        }

        return _biases.GetOrAdd(layer.Name + "/" + Planning.TrialKeys.Describe(setting), _ =>
        {
            var inputs = _inputs[layer.Name];
            var shift = BiasCorrection.Shift(_model.GetWeight(layer), Dequantized(layer, setting), inputs.Layout, inputs.Moments);
            return site.Corrected(shift);
        });
    }

    /// <summary>Bytes the export's corrected bias adds to the file, by layer (see <see cref="BiasSite.ExportFileBytes"/>).</summary>
    public IReadOnlyDictionary<string, long> BiasFileBytes() =>
        _biasSites.ToDictionary(p => p.Key, p => p.Value.ExportFileBytes(_model.Proto.Graph), StringComparer.Ordinal);

    /// <summary>
    /// Bytes this rounder holds for the rest of a search: every layer's input moments (Σx, and Σxxᵀ for compensated
    /// rounding), the Cholesky factors of each layer that can be compensated (one columns x columns double matrix per
    /// group, kept once computed, counted whether computed yet or not), and one more such matrix for the factoring under
    /// way. The compensated integers and corrected biases are not counted: a few bytes per weight, next to the weights.
    /// </summary>
    public long HeldBytes
    {
        get
        {
            long moments = 0, factors = 0, workspace = 0;
            foreach (var inputs in _inputs.Values)
            {
                var m = inputs.Moments;
                moments += InputMoments.BytesFor(m.Groups, m.Columns, m.HasSecondMoments);
                if (m.HasSecondMoments)
                {
                    var matrix = (long)m.Columns * m.Columns * sizeof(double);
                    factors += m.Groups * matrix;
                    workspace = Math.Max(workspace, matrix);
                }
            }

            return moments + factors + workspace;
        }
    }

    /// <summary>Layers whose input moments were gathered, by name.</summary>
    public IReadOnlyDictionary<string, LayerInputs> Inputs => _inputs;

    /// <summary>True when <paramref name="layer"/> can be rounded with compensation (its inputs were gathered).</summary>
    public bool Compensates(string layer) => _inputs.TryGetValue(layer, out var inputs) && inputs.Moments.HasSecondMoments;

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

        // Bias correction moves the bias, not the integers: both share one rounding.
        return _compensated.GetOrAdd(layer.Name + "/" + Planning.TrialKeys.Describe(setting with { BiasCorrection = false }), _ =>
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
