using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Bytes each layer setting takes in the written model file, under a <see cref="StorageRule"/>, and the bytes
/// that no setting changes. Container counts are exact: they are the serialized sizes of the very initializers
/// and nodes the export writes (<see cref="WeightStorage"/>), so the predicted file is the written file up to the
/// few bytes of the graph's length prefix. With activation quantization, a layer at an integer width also carries
/// its input's QuantizeLinear/DequantizeLinear pair and, for 8-bit weights, the uint8 form's zero points
/// (<see cref="WeightStorage.StoresUnsigned"/>). Packed counts replace the stored weight payload with ceil(n x bits / 8).
/// </summary>
public sealed class ModelSizer
{
    private readonly OnnxModel model;
    private readonly Dictionary<(string Layer, LayerSetting Setting), long> cache = [];
    private readonly ILookup<string, ActivationQuantization> activationsByLayer;

    /// <param name="opset">The opset to count for; the model's own by default (a what-if count may name another).</param>
    /// <param name="activations">The activations the export quantizes next to integer weights (none by default).</param>
    /// <param name="biasFileBytes">Bytes a corrected bias adds to the file, by layer (<see cref="Evaluation.WeightRounder.BiasFileBytes"/>),
    /// counted for settings with bias correction.</param>
    public ModelSizer(OnnxModel model, StorageRule storage, long? opset = null, IReadOnlyList<ActivationQuantization>? activations = null, IReadOnlyDictionary<string, long>? biasFileBytes = null)
    {
        BiasFileBytes = biasFileBytes ?? new Dictionary<string, long>(StringComparer.Ordinal);
        ArgumentNullException.ThrowIfNull(model);
        this.model = model;
        Storage = storage;
        Opset = opset ?? model.Opset;
        Activations = activations ?? [];
        activationsByLayer = Activations.ToLookup(a => a.Layer, StringComparer.Ordinal);
        Float32FileBytes = model.Float32FileBytes;
        OtherBytes = model.OtherFileBytes;
    }

    public StorageRule Storage { get; }

    /// <summary>Bytes a corrected bias adds to the file, by layer; layers not listed add none.</summary>
    public IReadOnlyDictionary<string, long> BiasFileBytes { get; }

    /// <summary>The activations counted with their layers (quantized when the layer's weight is an integer).</summary>
    public IReadOnlyList<ActivationQuantization> Activations { get; }

    /// <summary>The opset the export writes at (the model's, after any explicit raise).</summary>
    public long Opset { get; }

    /// <summary>Size of the model file with every weight in FP32, in bytes.</summary>
    public long Float32FileBytes { get; }

    /// <summary>Bytes of the file that stay as they are: graph structure, biases, every tensor that is not a layer weight.</summary>
    public long OtherBytes { get; }

    /// <summary>Bytes the layer's weight takes in the file under a setting (its initializers and nodes).</summary>
    public long LayerBytes(WeightLayer layer, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(setting);
        var key = (layer.Name, setting with { Clip = ClipMethod.MinMax, Percentile = 0 });
        if (cache.TryGetValue(key, out var bytes))
        {
            return bytes;
        }

        var activations = BitWidths.IsInteger(setting.Bits) ? activationsByLayer[layer.Name].ToList() : [];
        bytes = setting.Bits == BitWidths.Float32
            ? model.Float32EntryBytes(layer)
            : WeightStorage.FileBytes(layer, setting, Opset, activations.Count > 0)
              + activations.Sum(a => ActivationQdq.FileBytes(model.Proto.Graph, a))
              + (setting.BiasCorrection && BitWidths.IsInteger(setting.Bits) ? BiasFileBytes.GetValueOrDefault(layer.Name) : 0);
        if (Storage == StorageRule.Packed && BitWidths.IsInteger(setting.Bits))
        {
            var container = CostModel.PayloadBytes(layer.ParameterCount, WeightStorage.ContainerBits(setting, Opset));
            bytes += CostModel.PayloadBytes(layer.ParameterCount, setting.Bits) - container;
        }

        cache[key] = bytes;
        return bytes;
    }
}
