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

    /// <summary>Name of the graph input that feeds copy <paramref name="copy"/> (1..) of a stacked weight; copy 0 reads the weight's own name.</summary>
    public static string WidthInput(string weight, int copy) => copy == 0 ? weight : $"{weight}::width{copy}";

    /// <summary>
    /// The suffix from <paramref name="position"/> with <paramref name="copies"/> copies of the calibration chunk stacked on
    /// axis 0: each of <paramref name="batched"/> (cut-set tensors that carry the samples on axis 0) is concatenated with
    /// itself <paramref name="copies"/> times inside the graph, and every node that reads one of
    /// <paramref name="stackedWeights"/> becomes Split (axis 0) into copies, one clone of the node per copy reading its
    /// own weight input (<see cref="WidthInput"/>), and Concat (axis 0) back. Row block j of every output is then what
    /// the plain suffix gives with copy j's weights, as long as every op downstream keeps samples apart on axis 0; that
    /// the caller checks against the reference (an ONNX graph cannot say it). Null, with the reason, when a reader of a
    /// stacked weight is not a Conv, ConvTranspose, MatMul or Gemm reading it as its second input from a first input with
    /// samples on axis 0, or a node of the suffix has a body (its outer-scope reads could not be redirected).
    /// Graph inputs for which <paramref name="constant"/> gives a tensor (the weights of layers this suffix never perturbs)
    /// become initializers.
    /// </summary>
    public ModelProto? StackedSuffix(
        int position,
        IReadOnlyCollection<string> stackedWeights,
        int copies,
        IReadOnlyCollection<string> batched,
        IReadOnlyDictionary<string, (int ElementType, int Rank)> activationTypes,
        Func<string, TensorProto?> constant,
        out string reason)
    {
        reason = string.Empty;
        var model = Suffix(position, activationTypes);
        var graph = model.Graph;
        if (graph.Node.FirstOrDefault(n => n.Attribute.Any(a => a.G is not null || a.Graphs.Count > 0)) is { } withBody)
        {
            reason = $"node '{withBody.Name}' ({withBody.OpType}) has a body";
            return null;
        }

        var opset = model.OpsetImport.Where(o => o.Domain.Length == 0 || o.Domain == "ai.onnx").Select(o => o.Version).DefaultIfEmpty(1).Max();
        var weights = stackedWeights.ToHashSet(StringComparer.Ordinal);
        // One copy needs no stacking: the suffix only gets its constants back.
        var stackedNames = copies > 1 ? batched.ToDictionary(n => n, n => $"{n}::stacked", StringComparer.Ordinal) : [];
        var nodes = new List<NodeProto>();
        foreach (var (name, stacked) in stackedNames)
        {
            var tile = new NodeProto { Name = stacked, OpType = "Concat", Output = { stacked } };
            tile.Input.AddRange(Enumerable.Repeat(name, copies));
            tile.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = 0 });
            nodes.Add(tile);
        }

        foreach (var original in graph.Node)
        {
            var node = original.Clone();
            for (var i = 0; i < node.Input.Count; i++)
            {
                if (stackedNames.TryGetValue(node.Input[i], out var stacked))
                {
                    node.Input[i] = stacked;
                }
            }

            if (copies == 1 || !node.Input.Any(weights.Contains))
            {
                nodes.Add(node);
                continue;
            }

            if (!StacksOnBatch(node, weights))
            {
                reason = $"node '{node.Name}' ({node.OpType}) reads a weight other than as the second input of a Conv, ConvTranspose, MatMul or Gemm with samples on axis 0";
                return null;
            }

            nodes.AddRange(SplitPerCopy(node, copies, opset));
        }

        graph.Node.Clear();
        graph.Node.AddRange(nodes);

        // Weights no copy perturbs become constants again, so ONNX Runtime can fold and pre-pack them as in a plain pass.
        foreach (var input in graph.Input.Where(i => !weights.Contains(i.Name)).ToList())
        {
            if (constant(input.Name) is { } tensor)
            {
                graph.Input.Remove(input);
                graph.Initializer.Add(tensor);
            }
        }

        foreach (var input in graph.Input.Where(i => weights.Contains(i.Name)).ToList())
        {
            for (var j = 1; j < copies; j++)
            {
                var copy = input.Clone();
                copy.Name = WidthInput(input.Name, j);
                graph.Input.Add(copy);
            }
        }

        return model;
    }

    private static bool StacksOnBatch(NodeProto node, HashSet<string> weights) =>
        node.OpType is "Conv" or "ConvTranspose" or "MatMul" or "Gemm"
        && node.Input.Count >= 2
        && weights.Contains(node.Input[1])
        && !weights.Contains(node.Input[0])
        && node.Input.Skip(2).All(i => !weights.Contains(i))
        && node.Output.Count == 1
        && !(node.OpType == "Gemm" && node.Attribute.Any(a => a.Name == "transA" && a.I != 0));

    /// <summary>Split(input 0) -> one clone per copy with its own weight -> Concat, all on axis 0, writing the node's output.</summary>
    private static IEnumerable<NodeProto> SplitPerCopy(NodeProto node, int copies, long opset)
    {
        var prefix = $"{node.Name}::{node.Output[0]}";
        var split = new NodeProto { Name = $"{prefix}::split", OpType = "Split", Input = { node.Input[0] } };
        split.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = 0 });
        if (opset >= 18)
        {
            // From opset 18 Split needs the number of outputs said when no sizes are given (equal parts either way).
            split.Attribute.Add(new AttributeProto { Name = "num_outputs", Type = AttributeProto.Types.AttributeType.Int, I = copies });
        }

        var concat = new NodeProto { Name = $"{prefix}::concat", OpType = "Concat", Output = { node.Output[0] } };
        concat.Attribute.Add(new AttributeProto { Name = "axis", Type = AttributeProto.Types.AttributeType.Int, I = 0 });
        var clones = new List<NodeProto>(copies);
        for (var j = 0; j < copies; j++)
        {
            split.Output.Add($"{prefix}::in{j}");
            var clone = node.Clone();
            clone.Name = $"{prefix}::copy{j}";
            clone.Input[0] = $"{prefix}::in{j}";
            clone.Input[1] = WidthInput(node.Input[1], j);
            clone.Output[0] = $"{prefix}::out{j}";
            concat.Input.Add(clone.Output[0]);
            clones.Add(clone);
        }

        return [split, .. clones, concat];
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
