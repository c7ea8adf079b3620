using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Refuses a graph whose nodes feed each other in a loop (a &lt;- b, b &lt;- a), or that assigns one value
/// twice. ONNX requires every graph to be acyclic and each value to be assigned once (onnx.ai IR spec,
/// "Graphs"); a walk that follows producers back from a value, as the normaliser does, would otherwise
/// never end. Kahn's algorithm over each graph, counting the outer-scope values a node's subgraphs read as
/// inputs of that node, so a loop through an If or Loop body is found too.
/// </summary>
internal static class GraphCycles
{
    public static void Check(P.ModelProto model)
    {
        foreach (var graph in ModelChecks.AllGraphs(model.Graph))
        {
            CheckGraph(graph);
        }
    }

    private static void CheckGraph(P.GraphProto graph)
    {
        var producer = new Dictionary<string, int>(StringComparer.Ordinal);
        for (var i = 0; i < graph.Node.Count; i++)
        {
            foreach (var output in graph.Node[i].Output)
            {
                if (output.Length > 0 && !producer.TryAdd(output, i))
                {
                    throw new EngineException(
                        "model-invalid",
                        $"The model is invalid: value '{output}' is assigned by both node '{ModelChecks.Label(graph.Node[producer[output]])}' and node '{ModelChecks.Label(graph.Node[i])}'; ONNX assigns each value once, so re-export the model.");
                }
            }
        }

        var pending = new int[graph.Node.Count];
        var readers = new List<int>[graph.Node.Count];
        for (var i = 0; i < graph.Node.Count; i++)
        {
            foreach (var name in GraphSlicer.NamesRead(graph.Node[i]))
            {
                if (producer.TryGetValue(name, out var from))
                {
                    (readers[from] ??= []).Add(i);
                    pending[i]++;
                }
            }
        }

        var ready = new Queue<int>();
        for (var i = 0; i < pending.Length; i++)
        {
            if (pending[i] == 0)
            {
                ready.Enqueue(i);
            }
        }

        var done = 0;
        while (ready.TryDequeue(out var node))
        {
            done++;
            foreach (var reader in readers[node] ?? [])
            {
                if (--pending[reader] == 0)
                {
                    ready.Enqueue(reader);
                }
            }
        }

        if (done < graph.Node.Count)
        {
            var stuck = graph.Node.Where((_, i) => pending[i] > 0).Select(ModelChecks.Label).Take(5).ToList();
            throw new EngineException(
                "model-invalid",
                $"The model is invalid: node '{stuck[0]}' is part of a cycle (nodes {string.Join(", ", stuck.Select(s => $"'{s}'"))} wait on each other's outputs); an ONNX graph must be acyclic, so re-export the model.");
        }
    }
}
