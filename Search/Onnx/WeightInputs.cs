using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Which inputs of an operator hold a quantizable weight, and how each weight is laid out (its
/// per-channel axis), per the ONNX operator definitions. Adding an operator with weights starts here.
/// </summary>
internal static class WeightInputs
{
    /// <summary>Ops whose weight inputs are layers.</summary>
    public static readonly IReadOnlySet<string> LayerOps = new HashSet<string>(StringComparer.Ordinal)
    {
        "Conv", "ConvTranspose", "Gemm", "MatMul", "LSTM", "GRU", "RNN", "Gather",
    };

    /// <summary>
    /// Inputs of layer ops that hold constants which stay FP32 by design and are never listed as skipped:
    /// biases (Conv/ConvTranspose/Gemm input 2, LSTM/GRU/RNN B), sequence lengths, initial states and Gather indices.
    /// </summary>
    public static bool IsAuxiliary(P.NodeProto node, int input) => node.OpType switch
    {
        "Conv" or "ConvTranspose" or "Gemm" => input == 2,
        "LSTM" or "GRU" or "RNN" => input >= 3,
        "Gather" => input == 1,
        _ => false,
    };

    /// <summary>
    /// The weight inputs of <paramref name="node"/>: (input index, role). The role names the weight within
    /// the node ("W", "R" of a recurrent op) and is null for ops with one weight.
    /// </summary>
    public static IReadOnlyList<(int Index, string? Role)> Of(P.NodeProto node)
    {
        if (node.Domain is not ("" or "ai.onnx"))
        {
            return [];
        }

        List<(int, string?)> slots = node.OpType switch
        {
            "Conv" or "ConvTranspose" or "Gemm" or "MatMul" => [(1, null)],
            // LSTM/GRU/RNN: W is [num_directions, gates*hidden, input], R is [num_directions, gates*hidden, hidden].
            "LSTM" or "GRU" or "RNN" => [(1, "W"), (2, "R")],
            // Gather reads rows of its data input (input 0) when it gathers along axis 0: an embedding table.
            "Gather" when (ModelChecks.Attribute(node, "axis")?.I ?? 0) == 0 => [(0, null)],
            _ => [],
        };
        return slots.Where(s => s.Item1 < node.Input.Count && node.Input[s.Item1].Length > 0).ToList();
    }

    /// <summary>
    /// The per-channel axis of the weight at input <paramref name="index"/>:
    /// Conv W [M, C/group, k...]: 0 (output channel). ConvTranspose W [C, M/group, k...]: 1.
    /// Gemm B [K, N]: 1, or 0 with transB = 1. MatMul B [..., K, N]: the last axis.
    /// LSTM/GRU/RNN W and R [num_directions, gates*hidden, n]: 1, the gate row (the recurrent op's output unit);
    /// one scale per gate row, shared by the directions of a bidirectional layer, so that one
    /// DequantizeLinear with axis 1 expresses it exactly (see README, "Recurrent layers").
    /// Gather table [rows, ...]: 0, one scale per row, so every looked-up row dequantizes with its own scale.
    /// </summary>
    public static int ChannelAxis(P.NodeProto node, int index, int rank) => node.OpType switch
    {
        "Conv" => 0,
        "ConvTranspose" => 1,
        "Gemm" => ModelChecks.Attribute(node, "transB")?.I == 1 ? 0 : 1,
        "LSTM" or "GRU" or "RNN" => rank >= 2 ? 1 : 0,
        "Gather" => 0,
        _ => Math.Max(rank - 1, 0),
    };

    /// <summary>The layer's name: the node's (scoped) name, with the role appended for ops with several weights ("lstm.W").</summary>
    public static string LayerName(string scopedNodeName, string? role) =>
        role is null ? scopedNodeName : scopedNodeName + "." + role;

    /// <summary>
    /// True when a Gather's constant data is an embedding table the engine quantizes: FP32 as the Gather
    /// reads it, with rows of at least one value each (rank 2 or more). Other Gathers (shape lookups,
    /// integer tables) are not layers.
    /// </summary>
    public static bool IsTable(WeightSource source) =>
        source.Tensor.Dims.Count >= 2 && TensorCodec.IsCastableFloat(source.Tensor.DataType) && source.ConsumedType == (int)P.TensorProto.Types.DataType.Float;
}
