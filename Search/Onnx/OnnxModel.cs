using System.Security.Cryptography;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// An uploaded FP32 ONNX model, checked and normalised: BatchNormalization folded into the Conv before
/// it and every layer weight held as one FP32 initializer of the main graph named
/// <see cref="WeightLayer.WeightName"/>, so variants of the model differ by swapped initializers only.
/// </summary>
public sealed class OnnxModel
{
    /// <summary>The newest standard opset a model can be raised to (see <see cref="Load(byte[], string, long?)"/>).</summary>
    public const long HighestTargetOpset = OperatorHistory.HighestTarget;

    private readonly Dictionary<string, P.TensorProto> weightTensors;

    private OnnxModel(string name, string sha256, P.ModelProto proto, IReadOnlyList<WeightLayer> layers, IReadOnlyList<string> notes, IReadOnlyList<SkippedWeight> skipped, OpsetRaise? raise, RaisedGraphs? raisedGraphs)
    {
        Skipped = skipped;
        Raise = raise;
        RaisedGraphs = raisedGraphs;
        Name = name;
        Sha256 = sha256;
        Proto = proto;
        Layers = layers;
        Notes = notes;
        Opset = ModelChecks.DefaultOpset(proto);
        IrVersion = proto.IrVersion;
        var initializers = proto.Graph.Initializer.Select(t => t.Name).ToHashSet(StringComparer.Ordinal);
        Inputs = proto.Graph.Input.Where(i => !initializers.Contains(i.Name)).Select(Describe).ToArray();
        Outputs = proto.Graph.Output.Select(Describe).ToArray();
        var byName = proto.Graph.Initializer.ToDictionary(t => t.Name, StringComparer.Ordinal);
        weightTensors = layers.ToDictionary(l => l.Name, l => byName[l.WeightName], StringComparer.Ordinal);
    }

    /// <summary>Model name: the upload's file name without extension.</summary>
    public string Name { get; }

    /// <summary>Lower-case hex SHA-256 of the uploaded bytes.</summary>
    public string Sha256 { get; }

    /// <summary>Version of the standard ONNX operator set (domain "" or "ai.onnx"): the target opset when the model was raised.</summary>
    public long Opset { get; }

    /// <summary>The standard opset the upload imported (equal to <see cref="Opset"/> unless the model was raised).</summary>
    public long OriginalOpset => Raise?.FromOpset ?? Opset;

    /// <summary>The explicit opset raise applied at load time; null when no target opset was asked for.</summary>
    public OpsetRaise? Raise { get; }

    /// <summary>The upload and its raised form, both before normalisation, for checking the raise in ONNX Runtime; null when nothing was rewritten.</summary>
    internal RaisedGraphs? RaisedGraphs { get; }

    public long IrVersion { get; }

    /// <summary>Graph inputs the caller feeds (inputs that are not initializers).</summary>
    public IReadOnlyList<ValueDescription> Inputs { get; }

    public IReadOnlyList<ValueDescription> Outputs { get; }

    /// <summary>Every quantizable weight, in graph order.</summary>
    public IReadOnlyList<WeightLayer> Layers { get; }

    /// <summary>What normalisation did and skipped, one sentence each (folded BatchNormalization, activation MatMuls...).</summary>
    public IReadOnlyList<string> Notes { get; }

    /// <summary>Weights that stay FP32 because the engine does not quantize them, each with its reason.</summary>
    public IReadOnlyList<SkippedWeight> Skipped { get; }

    /// <summary>The normalised model.</summary>
    internal P.ModelProto Proto { get; }

    /// <summary>Size of the normalised model written with every weight in FP32 (BatchNormalization folded), in bytes.</summary>
    public long Float32FileBytes => Proto.CalculateSize();

    /// <summary>
    /// Bytes of the normalised model file that no layer weight takes: graph structure, biases and every other
    /// tensor, which the export writes unchanged. Exact up to the few bytes of the graph's length prefix.
    /// </summary>
    public long OtherFileBytes => Float32FileBytes - Layers.Sum(Float32EntryBytes);

    /// <summary>Bytes a layer's FP32 weight takes in the normalised file: its initializer and, for old IR versions, its graph-input entry.</summary>
    public long Float32EntryBytes(WeightLayer layer)
    {
        ArgumentNullException.ThrowIfNull(layer);
        var tensor = weightTensors[layer.Name];
        var listed = Proto.Graph.Input.FirstOrDefault(i => i.Name == layer.WeightName);
        return WeightStorage.EntryBytes(tensor) + (listed is null ? 0 : WeightStorage.EntryBytes(listed));
    }

    /// <summary>
    /// Reads, checks and normalises a model; throws <see cref="EngineException"/> for anything the engine cannot quantize.
    /// With <paramref name="targetOpset"/>, the graph is first raised to that standard opset (see <see cref="OpsetRaiser"/>),
    /// so normalisation, layers, trials and export all see the raised graph; whether the raise kept the outputs is
    /// checked on the calibration set by <see cref="Evaluation.OpsetRaiseCheck"/>.
    /// </summary>
    public static OnnxModel Load(byte[] bytes, string name, long? targetOpset = null) => Load(bytes, name, targetOpset, name);

    /// <param name="fileLabel">How refusals name the file: the upload's name, or the path given on the command line.</param>
    private static OnnxModel Load(byte[] bytes, string name, long? targetOpset, string fileLabel)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        var proto = ModelChecks.Parse(bytes, fileLabel);
        ModelChecks.DefaultOpset(proto);
        ModelChecks.RefuseExternalData(proto);
        TensorValidation.Check(proto);
        GraphCycles.Check(proto);
        ModelChecks.RefuseQuantizedOps(proto);
        OpsetRaise? raise = null;
        RaisedGraphs? raisedGraphs = null;
        if (targetOpset is { } target)
        {
            raise = OpsetRaiser.Raise(proto, target);
            if (raise.FromOpset != raise.ToOpset)
            {
                raisedGraphs = new RaisedGraphs(bytes, proto.ToByteArray());
            }
        }

        var (layers, notes, skipped) = ModelNormaliser.Normalise(proto);
        var sha256 = Convert.ToHexStringLower(SHA256.HashData(bytes));
        return new OnnxModel(name, sha256, proto, layers, notes, skipped, raise, raisedGraphs);
    }

    /// <summary>Loads a model file; only that one file is ever read (external data is refused, not followed).</summary>
    public static OnnxModel LoadFile(string path, long? targetOpset = null)
    {
        byte[] bytes;
        try
        {
            bytes = File.ReadAllBytes(path);
        }
        catch (Exception ex) when (ex is FileNotFoundException or DirectoryNotFoundException)
        {
            throw new EngineException("model-not-found", $"The model file '{path}' does not exist.", ex);
        }
        catch (Exception ex) when (ex is UnauthorizedAccessException or IOException)
        {
            throw new EngineException("model-unreadable", $"The model file '{path}' cannot be read: {ex.Message}", ex);
        }

        return Load(bytes, Path.GetFileNameWithoutExtension(path), targetOpset, path);
    }

    /// <summary>FP32 values of a layer's weight after BatchNormalization folding, in C order.</summary>
    public float[] GetWeight(WeightLayer layer)
    {
        ArgumentNullException.ThrowIfNull(layer);
        if (!weightTensors.TryGetValue(layer.Name, out var tensor))
        {
            throw new ArgumentException($"Layer '{layer.Name}' does not belong to model '{Name}'.", nameof(layer));
        }

        return TensorCodec.ToFloats(tensor);
    }

    /// <summary>
    /// The model with every layer weight turned into an FP32 graph input named <see cref="WeightLayer.WeightName"/>,
    /// so one ONNX Runtime session can run any weights.
    /// </summary>
    public byte[] BuildWeightsAsInputs()
    {
        var copy = Proto.Clone();
        var graph = copy.Graph;
        foreach (var layer in Layers)
        {
            var tensor = graph.Initializer.First(t => t.Name == layer.WeightName);
            graph.Initializer.Remove(tensor);
            var existing = graph.Input.FirstOrDefault(i => i.Name == layer.WeightName);
            if (existing is not null)
            {
                graph.Input.Remove(existing);
            }

            graph.Input.Add(FloatInput(layer.WeightName, layer.Shape));
        }

        return copy.ToByteArray();
    }

    /// <summary>The model with the named layers' weights replaced by the given FP32 values (C order); other layers unchanged.</summary>
    public byte[] BuildWithWeights(IReadOnlyDictionary<string, float[]> weightsByLayerName)
    {
        ArgumentNullException.ThrowIfNull(weightsByLayerName);
        var copy = Proto.Clone();
        var initializers = copy.Graph.Initializer;
        foreach (var (layerName, values) in weightsByLayerName)
        {
            var layer = Layers.FirstOrDefault(l => l.Name == layerName)
                ?? throw new ArgumentException($"Model '{Name}' has no layer '{layerName}'.", nameof(weightsByLayerName));
            if (values.Length != layer.ParameterCount)
            {
                throw new ArgumentException($"Layer '{layerName}' has {layer.ParameterCount} weights, got {values.Length}.", nameof(weightsByLayerName));
            }

            var index = initializers.Select((t, i) => (t, i)).First(x => x.t.Name == layer.WeightName).i;
            initializers[index] = TensorCodec.FromFloats(layer.WeightName, layer.Shape, values);
        }

        return copy.ToByteArray();
    }

    internal static P.ValueInfoProto FloatInput(string name, IEnumerable<long> shape)
    {
        var tensorType = new P.TypeProto.Types.Tensor { ElemType = (int)P.TensorProto.Types.DataType.Float, Shape = new P.TensorShapeProto() };
        foreach (var dim in shape)
        {
            tensorType.Shape.Dim.Add(new P.TensorShapeProto.Types.Dimension { DimValue = dim });
        }

        return new P.ValueInfoProto { Name = name, Type = new P.TypeProto { TensorType = tensorType } };
    }

    private static ValueDescription Describe(P.ValueInfoProto value)
    {
        var tensor = value.Type?.TensorType;
        if (tensor is null)
        {
            return new ValueDescription(value.Name, ElementType.Unsupported, []);
        }

        var shape = tensor.Shape?.Dim.Select(d => d.ValueCase == P.TensorShapeProto.Types.Dimension.ValueOneofCase.DimValue ? d.DimValue : (long?)null).ToArray() ?? [];
        return new ValueDescription(value.Name, ToElementType(tensor.ElemType), shape);
    }

    private static ElementType ToElementType(int dataType) => (P.TensorProto.Types.DataType)dataType switch
    {
        P.TensorProto.Types.DataType.Float => ElementType.Float32,
        P.TensorProto.Types.DataType.Float16 => ElementType.Float16,
        P.TensorProto.Types.DataType.Double => ElementType.Float64,
        P.TensorProto.Types.DataType.Int64 => ElementType.Int64,
        P.TensorProto.Types.DataType.Int32 => ElementType.Int32,
        P.TensorProto.Types.DataType.Int8 => ElementType.Int8,
        P.TensorProto.Types.DataType.Uint8 => ElementType.UInt8,
        P.TensorProto.Types.DataType.Bool => ElementType.Bool,
        _ => ElementType.Unsupported,
    };
}
