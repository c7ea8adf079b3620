using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// One graph of a model (the main graph or an If/Loop/Scan body) with what it defines. Subgraphs
/// see every value of their enclosing graphs, so lookups walk outwards through <see cref="Parent"/>.
/// </summary>
internal sealed class GraphScope
{
    public GraphScope(P.GraphProto graph, GraphScope? parent, string prefix)
    {
        Graph = graph;
        Parent = parent;
        Prefix = prefix;
        foreach (var tensor in graph.Initializer)
        {
            Initializers[tensor.Name] = tensor;
        }

        foreach (var input in graph.Input)
        {
            if (!Initializers.ContainsKey(input.Name))
            {
                Inputs.Add(input.Name);
            }
        }

        foreach (var sparse in graph.SparseInitializer)
        {
            Inputs.Add(sparse.Values.Name);
        }

        foreach (var node in graph.Node)
        {
            foreach (var output in node.Output)
            {
                if (output.Length > 0)
                {
                    Producers[output] = node;
                }
            }
        }
    }

    public P.GraphProto Graph { get; }

    public GraphScope? Parent { get; }

    /// <summary>Prefix of layer names for nodes of this graph, e.g. <c>If_3/then_branch/</c>; empty for the main graph.</summary>
    public string Prefix { get; }

    public Dictionary<string, P.TensorProto> Initializers { get; } = new(StringComparer.Ordinal);

    /// <summary>Values fed from outside the graph at run time (graph inputs without initializer, sparse initializers).</summary>
    public HashSet<string> Inputs { get; } = new(StringComparer.Ordinal);

    public Dictionary<string, P.NodeProto> Producers { get; } = new(StringComparer.Ordinal);

    public bool Defines(string name) => Initializers.ContainsKey(name) || Inputs.Contains(name) || Producers.ContainsKey(name);

    /// <summary>The innermost graph, from this one outwards, that defines <paramref name="name"/>.</summary>
    public GraphScope? Find(string name)
    {
        for (var scope = this; scope is not null; scope = scope.Parent)
        {
            if (scope.Defines(name))
            {
                return scope;
            }
        }

        return null;
    }
}
