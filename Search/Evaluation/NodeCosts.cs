using Onnx;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Multiply-add work of each main-graph node for one sample, from tensor shapes measured on a one-sample run:
/// 2 x (output elements) x (inner length) for Conv, ConvTranspose, Gemm and MatMul (the usual FLOP count of a
/// dense product, common practice), and one operation per output element for every other node. Downstream sums
/// of it price a suffix run; nodes inside If/Loop/Scan bodies count as their outer node's output.
/// </summary>
internal sealed class NodeCosts
{
    private readonly double[] _downstream;

    private NodeCosts(double[] perNode)
    {
        PerNode = perNode;
        _downstream = new double[perNode.Length + 1];
        for (var i = perNode.Length - 1; i >= 0; i--)
        {
            _downstream[i] = _downstream[i + 1] + perNode[i];
        }
    }

    /// <summary>Operations of each node, in graph order.</summary>
    public IReadOnlyList<double> PerNode { get; }

    /// <summary>Operations of the nodes at and after <paramref name="position"/> (position 0: the whole graph).</summary>
    public double Downstream(int position) => _downstream[Math.Clamp(position, 0, PerNode.Count)];

    /// <param name="graph">The main graph, nodes in topological order.</param>
    /// <param name="shapes">Shapes of the graph's tensors on a one-sample run (inputs, weights and node outputs); a tensor missing here counts as empty.</param>
    public static NodeCosts Of(GraphProto graph, IReadOnlyDictionary<string, long[]> shapes)
    {
        long[] Shape(string name) => shapes.TryGetValue(name, out var shape) ? shape : [];
        static double Elements(long[] shape) => shape.Aggregate(1.0, (product, d) => product * Math.Max(d, 0));

        var costs = new double[graph.Node.Count];
        for (var i = 0; i < graph.Node.Count; i++)
        {
            var node = graph.Node[i];
            var output = node.Output.Count > 0 ? Elements(Shape(node.Output[0])) : 0;
            var all = node.Output.Sum(o => o.Length > 0 ? Elements(Shape(o)) : 0);
            double inner = node.OpType switch
            {
                // Each output element sums over (input channels per group) x kernel = weight elements / output channels.
                "Conv" when node.Input.Count > 1 && Shape(node.Input[1]) is [var outChannels, ..] weight && outChannels > 0 => Elements(weight) / outChannels,

                // Each input element spreads over the kernel and the output channels of its group.
                "ConvTranspose" when node.Input.Count > 1 && Shape(node.Input[1]) is [var inChannels, ..] weight && inChannels > 0 && output > 0
                    => Elements(weight) / inChannels * Elements(Shape(node.Input[0])) / output,
                "MatMul" when Shape(node.Input[0]) is [.., var k] => k,
                "Gemm" when Shape(node.Input[0]) is [var rows, var columns] => TransposedA(node) ? rows : columns,
                _ => 0,
            };
            costs[i] = inner > 0 ? 2 * output * inner : all;
        }

        return new NodeCosts(costs);
    }

    private static bool TransposedA(NodeProto node) => node.Attribute.Any(a => a.Name == "transA" && a.I != 0);
}
