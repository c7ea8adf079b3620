using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using P = global::Onnx;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// One node reading a layer weight as a linear map of one input tensor: which tensor, how its values form input
/// vectors, and the weight's <see cref="LinearLayout"/>. Conv (1-D, 2-D: unfolded patches), Gemm (rows of A, or columns
/// with transA), MatMul with a 2-D weight (rows of the last axis) and the W of LSTM/GRU/RNN (rows of X's input axis).
/// Everything else has no such site, and its layer stays at nearest rounding: ConvTranspose (each input value reaches
/// several outputs through different weights, so no one input vector per output), a recurrent R (it multiplies the
/// op's hidden state, which the graph never exposes), a Gather table (its "input" is a one-hot row choice, so H is
/// diagonal and compensation has nothing to move), 3-D convolutions, batched MatMul weights and nodes inside If/Loop bodies.
/// </summary>
internal sealed record LinearInputSite(string Tensor, LinearLayout Layout, ConvGeometry? Conv, bool Transposed)
{
    /// <summary>The sites of <paramref name="layer"/> in the main graph, or null when some reader has none (the layer then stays at nearest).</summary>
    public static IReadOnlyList<LinearInputSite>? Of(WeightLayer layer, P.GraphProto graph)
    {
        var sites = new List<LinearInputSite>();
        foreach (var node in graph.Node)
        {
            foreach (var (index, role) in WeightInputs.Of(node))
            {
                if (node.Input[index] != layer.WeightName)
                {
                    continue;
                }

                if (For(node, index, role, layer.Shape) is not { } site)
                {
                    return null;
                }

                sites.Add(site);
            }
        }

        // A reader inside an If/Loop body is not in the main graph: its inputs cannot be read from outside.
        return sites.Count == layer.Consumers.Count && sites.Count > 0 && sites.All(s => s.Layout == sites[0].Layout) ? sites : null;
    }

    /// <summary>True when compensated rounding can apply to a layer of this operator (the operator test only; the node decides).</summary>
    public static bool Applies(WeightLayer layer) => layer.Op switch
    {
        "Conv" => layer.Shape.Count is 3 or 4,
        "Gemm" => layer.Shape.Count == 2,
        "MatMul" => layer.Shape.Count == 2,
        "LSTM" or "GRU" or "RNN" => !layer.Name.EndsWith(".R", StringComparison.Ordinal) && layer.Shape.Count == 3,
        _ => false,
    };

    private static LinearInputSite? For(P.NodeProto node, int index, string? role, IReadOnlyList<long> shape)
    {
        var input = node.Input[0];
        if (input.Length == 0)
        {
            return null;
        }

        switch (node.OpType)
        {
            case "Conv" when index == 1 && ConvGeometry.Of(node, shape) is { } conv && shape[0] % conv.Group == 0:
                var columns = (int)(shape.Skip(1).Aggregate(1L, (a, b) => a * b));
                return new LinearInputSite(input, new LinearLayout(conv.Group, (int)shape[0] / conv.Group, columns, RowMajor: true), conv, false);
            case "Gemm" when index == 1 && shape.Count == 2:
                var transB = ModelChecks.Attribute(node, "transB")?.I == 1;
                var transA = ModelChecks.Attribute(node, "transA")?.I == 1;
                return transB
                    ? new LinearInputSite(input, new LinearLayout(1, (int)shape[0], (int)shape[1], RowMajor: true), null, transA)
                    : new LinearInputSite(input, new LinearLayout(1, (int)shape[1], (int)shape[0], RowMajor: false), null, transA);
            case "MatMul" when index == 1 && shape.Count == 2:
                return new LinearInputSite(input, new LinearLayout(1, (int)shape[1], (int)shape[0], RowMajor: false), null, false);
            case "LSTM" or "GRU" or "RNN" when role == "W" && shape.Count == 3:
                return new LinearInputSite(input, new LinearLayout(1, (int)(shape[0] * shape[1]), (int)shape[2], RowMajor: true), null, false);
            default:
                return null;
        }
    }
}
