using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Writes 8-bit activation quantization into a graph: QuantizeLinear then DequantizeLinear (uint8,
/// per-tensor) on input 0 of each listed consumer node. For trials the pair goes behind a switch,
/// Where(switch, DequantizeLinear(QuantizeLinear(x)), x), with one boolean scalar graph input per
/// layer, so that one session runs every trial: Where selects, it does not compute, so a switch that
/// is off passes x through bit for bit and one that is on passes exactly what the QDQ export computes.
/// </summary>
internal static class ActivationQdq
{
    /// <summary>Name of the boolean graph input that turns a layer's activation quantization on.</summary>
    public static string SwitchName(string layer) => DerivedNames.Of(layer, "activation-switch");

    /// <summary>The model with every listed activation behind a switch; switches are added as graph inputs.</summary>
    public static ModelProto WithSwitches(ModelProto model, IReadOnlyList<ActivationQuantization> activations)
    {
        var copy = model.Clone();
        Insert(copy.Graph, activations, switched: true);
        foreach (var layer in activations.Select(a => a.Layer).Distinct(StringComparer.Ordinal))
        {
            copy.Graph.Input.Add(BoolScalar(SwitchName(layer)));
        }

        return copy;
    }

    /// <summary>Inserts QuantizeLinear/DequantizeLinear in front of each listed consumer of <paramref name="graph"/>.</summary>
    public static void Insert(GraphProto graph, IEnumerable<ActivationQuantization> activations, bool switched)
    {
        var names = new HashSet<string>(StringComparer.Ordinal);
        names.UnionWith(graph.Input.Select(i => i.Name));
        names.UnionWith(graph.Initializer.Select(i => i.Name));
        names.UnionWith(graph.Node.SelectMany(n => n.Output));
        foreach (var activation in activations)
        {
            var index = IndexOf(graph, activation.Consumer);
            var consumer = graph.Node[index];
            var (initializers, nodes, read) = Build(activation, consumer, names, switched);
            graph.Initializer.AddRange(initializers);

            // In front of the consumer: everything x depends on is already before it (topological order).
            for (var i = nodes.Count - 1; i >= 0; i--)
            {
                graph.Node.Insert(index, nodes[i]);
            }

            consumer.Input[0] = read;
        }
    }

    /// <summary>
    /// Bytes the export adds to <paramref name="graph"/> for one activation: its scale and zero point, its
    /// QuantizeLinear and DequantizeLinear, and the consumer's longer input name. Counted from the very
    /// messages <see cref="Insert"/> writes, so the file-size model is exact here too (but for a name that
    /// collides with one already in the graph and gets a numeric suffix: a few bytes).
    /// </summary>
    public static long FileBytes(GraphProto graph, ActivationQuantization activation)
    {
        var consumer = graph.Node[IndexOf(graph, activation.Consumer)];
        var (initializers, nodes, read) = Build(activation, consumer, [], switched: false);
        var renamed = consumer.Clone();
        renamed.Input[0] = read;
        return initializers.Sum(WeightStorage.EntryBytes) + nodes.Sum(WeightStorage.EntryBytes)
            + WeightStorage.EntryBytes(renamed) - WeightStorage.EntryBytes(consumer);
    }

    private static (List<TensorProto> Initializers, List<NodeProto> Nodes, string Read) Build(
        ActivationQuantization activation, NodeProto consumer, HashSet<string> names, bool switched)
    {
        if (consumer.Input.Count == 0 || consumer.Input[0] != activation.Tensor)
        {
            throw new InvalidOperationException($"Node '{activation.Consumer}' does not read '{activation.Tensor}' as its input 0.");
        }

        var stem = activation.Consumer + "/activation";
        var scale = Unique(names, DerivedNames.Of(stem, "scale"));
        var zeroPoint = Unique(names, DerivedNames.Of(stem, "zero-point"));
        var quantized = Unique(names, DerivedNames.Of(stem, "levels"));
        var dequantized = Unique(names, DerivedNames.Of(stem, "dequantized"));
        var scaleTensor = new TensorProto { Name = scale, DataType = (int)TensorProto.Types.DataType.Float };
        scaleTensor.FloatData.Add(activation.Scale);
        var initializers = new List<TensorProto>
        {
            scaleTensor,
            new() { Name = zeroPoint, DataType = (int)TensorProto.Types.DataType.Uint8, RawData = ByteString.CopyFrom((byte)activation.ZeroPoint) },
        };

        var nodes = new List<NodeProto>
        {
            new() { Name = stem + "/quantize", OpType = "QuantizeLinear", Input = { activation.Tensor, scale, zeroPoint }, Output = { quantized } },
            new() { Name = stem + "/dequantize", OpType = "DequantizeLinear", Input = { quantized, scale, zeroPoint }, Output = { dequantized } },
        };
        var read = dequantized;
        if (switched)
        {
            read = Unique(names, DerivedNames.Of(stem, "switched"));
            nodes.Add(new NodeProto
            {
                Name = stem + "/switch",
                OpType = "Where",
                Input = { SwitchName(activation.Layer), dequantized, activation.Tensor },
                Output = { read },
            });
        }

        return (initializers, nodes, read);
    }

    private static int IndexOf(GraphProto graph, string node)
    {
        for (var i = 0; i < graph.Node.Count; i++)
        {
            if (graph.Node[i].Name == node)
            {
                return i;
            }
        }

        throw new InvalidOperationException($"The main graph has no node '{node}'.");
    }

    private static string Unique(HashSet<string> names, string wanted)
    {
        var name = wanted;
        for (var n = 1; !names.Add(name); n++)
        {
            name = $"{wanted}-{n}";
        }

        return name;
    }

    private static ValueInfoProto BoolScalar(string name) => new()
    {
        Name = name,
        Type = new TypeProto
        {
            TensorType = new TypeProto.Types.Tensor { ElemType = (int)TensorProto.Types.DataType.Bool, Shape = new TensorShapeProto() },
        },
    };
}
