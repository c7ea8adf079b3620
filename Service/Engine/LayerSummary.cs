namespace Bitbudget.Service.Engine;

/// <summary>One quantizable layer: the node, its weight tensor and how it would be split into channels.</summary>
/// <param name="Parameters">Number of weight elements.</param>
/// <param name="BatchNormFolded">Whether a following inference-mode BatchNormalization was folded into the weight.</param>
internal sealed record LayerSummary(
    string Name,
    string Op,
    string Weight,
    IReadOnlyList<long> Shape,
    long Parameters,
    int ChannelAxis,
    bool BatchNormFolded)
{
    public static LayerSummary From(Bitbudget.Search.Onnx.WeightLayer layer) =>
        new(layer.Name, layer.Op, layer.WeightName, layer.Shape, layer.ParameterCount, layer.ChannelAxis, layer.FollowedByBatchNorm);
}
