using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Cuts a model's main graph at a node so that only the part downstream of a perturbed layer needs
/// to run. The cut-set at position p is every tensor made before node p (or fed as a graph input)
/// and read at or after it, including reads from inside If/Loop/Scan bodies; the suffix model takes
/// the cut-set as its graph inputs. Nodes in an ONNX graph are stored in topological order, which
/// makes "before" well defined.
/// </summary>
internal sealed class GraphSlicer
{
    private readonly ModelProto _model;
    private readonly List<HashSet<string>> _reads;
    private readonly Dictionary<string, ValueInfoProto> _graphInputs;
    private readonly HashSet<string> _initializers;

    public GraphSlicer(ModelProto model)
    {
        _model = model;
        var graph = model.Graph;
        _reads = graph.Node.Select(NamesRead).ToList();
        _graphInputs = graph.Input.ToDictionary(i => i.Name, StringComparer.Ordinal);
        _initializers = graph.Initializer.Select(i => i.Name).ToHashSet(StringComparer.Ordinal);
    }

    public int NodeCount => _model.Graph.Node.Count;

    /// <summary>Index of the first main-graph node that reads <paramref name="tensor"/> (directly or in a body); -1 if none.</summary>
    public int FirstReader(string tensor)
    {
        for (var i = 0; i < _reads.Count; i++)
        {
            if (_reads[i].Contains(tensor))
            {
                return i;
            }
        }

        return -1;
    }

    /// <summary>Tensors the suffix from <paramref name="position"/> needs from outside itself, initializers excluded.</summary>
    public IReadOnlyList<string> CutSet(int position)
    {
        var graph = _model.Graph;
        var madeInSuffix = new HashSet<string>(StringComparer.Ordinal);
        for (var i = position; i < graph.Node.Count; i++)
        {
            madeInSuffix.UnionWith(graph.Node[i].Output.Where(o => o.Length > 0));
        }

        var needed = new SortedSet<string>(StringComparer.Ordinal);
        for (var i = position; i < graph.Node.Count; i++)
        {
            needed.UnionWith(_reads[i]);
        }

        return needed.Where(n => !madeInSuffix.Contains(n) && !_initializers.Contains(n)).ToList();
    }

    /// <summary>Graph outputs made by nodes at or after <paramref name="position"/>.</summary>
    public IReadOnlyList<string> OutputsMadeFrom(int position)
    {
        var graph = _model.Graph;
        var made = new HashSet<string>(StringComparer.Ordinal);
        for (var i = position; i < graph.Node.Count; i++)
        {
            made.UnionWith(graph.Node[i].Output);
        }

        return graph.Output.Select(o => o.Name).Where(made.Contains).ToList();
    }

    /// <summary>True when <paramref name="tensor"/> is a graph input of the whole model (data or weight).</summary>
    public bool IsGraphInput(string tensor) => _graphInputs.ContainsKey(tensor);

    /// <summary>The model with extra graph outputs, so one run also returns the activations a suffix starts from.</summary>
    public ModelProto WithExtraOutputs(IEnumerable<string> tensors)
    {
        var model = _model.Clone();
        var existing = model.Graph.Output.Select(o => o.Name).ToHashSet(StringComparer.Ordinal);
        foreach (var name in tensors.Where(existing.Add))
        {
            // Type left empty: ONNX Runtime infers the type of an intermediate output.
            model.Graph.Output.Add(new ValueInfoProto { Name = name });
        }

        return model;
    }

    /// <summary>
    /// The part of the model from <paramref name="position"/> on, with the cut-set as graph inputs.
    /// <paramref name="activationTypes"/> gives the element type (ONNX data type) and rank of each tapped activation.
    /// </summary>
    public ModelProto Suffix(int position, IReadOnlyDictionary<string, (int ElementType, int Rank)> activationTypes)
    {
        var source = _model.Graph;
        var model = _model.Clone();
        var graph = model.Graph;
        graph.Node.Clear();
        graph.Node.AddRange(source.Node.Skip(position).Select(n => n.Clone()));
        graph.Input.Clear();
        foreach (var name in CutSet(position))
        {
            graph.Input.Add(_graphInputs.TryGetValue(name, out var input) ? input.Clone() : Activation(name, activationTypes[name]));
        }

        var outputs = OutputsMadeFrom(position).ToHashSet(StringComparer.Ordinal);
        var kept = source.Output.Where(o => outputs.Contains(o.Name)).Select(o => o.Clone()).ToList();
        graph.Output.Clear();
        graph.Output.AddRange(kept);

        var read = new HashSet<string>(StringComparer.Ordinal);
        for (var i = position; i < source.Node.Count; i++)
        {
            read.UnionWith(_reads[i]);
        }

        var initializers = graph.Initializer.Where(t => read.Contains(t.Name)).ToList();
        graph.Initializer.Clear();
        graph.Initializer.AddRange(initializers);
        graph.ValueInfo.Clear();
        return model;
    }

    private static ValueInfoProto Activation(string name, (int ElementType, int Rank) type)
    {
        var shape = new TensorShapeProto();
        for (var d = 0; d < type.Rank; d++)
        {
            // Every dimension symbolic: the same suffix serves any batch size and spatial size.
            shape.Dim.Add(new TensorShapeProto.Types.Dimension { DimParam = $"{name}_d{d}" });
        }

        return new ValueInfoProto
        {
            Name = name,
            Type = new TypeProto
            {
                TensorType = new TypeProto.Types.Tensor { ElemType = type.ElementType, Shape = shape },
            },
        };
    }

    /// <summary>Every name a node reads: its inputs and, for nodes with bodies, the outer-scope names the bodies use.</summary>
    internal static HashSet<string> NamesRead(NodeProto node)
    {
        var names = node.Input.Where(i => i.Length > 0).ToHashSet(StringComparer.Ordinal);
        foreach (var attribute in node.Attribute)
        {
            if (attribute.G is { } body)
            {
                names.UnionWith(OuterNames(body));
            }

            foreach (var g in attribute.Graphs)
            {
                names.UnionWith(OuterNames(g));
            }
        }

        return names;
    }

    private static IEnumerable<string> OuterNames(GraphProto body)
    {
        var local = body.Input.Select(i => i.Name)
            .Concat(body.Initializer.Select(i => i.Name))
            .Concat(body.Node.SelectMany(n => n.Output))
            .ToHashSet(StringComparer.Ordinal);
        return body.Node.SelectMany(NamesRead).Where(n => !local.Contains(n)).ToList();
    }
}
