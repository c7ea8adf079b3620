using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>What one layer's weight becomes in the written model: initializers, and nodes that yield the FP32 weight in graph order.</summary>
/// <param name="Form">How the weight is turned back into FP32 (see <see cref="WeightStorage"/>).</param>
internal sealed record StoredWeight(IReadOnlyList<TensorProto> Initializers, IReadOnlyList<NodeProto> Nodes, string Form)
{
    /// <summary>Bytes these initializers and nodes add to the file as entries of the graph.</summary>
    public long SerializedBytes => Initializers.Sum(WeightStorage.EntryBytes) + Nodes.Sum(WeightStorage.EntryBytes);
}
