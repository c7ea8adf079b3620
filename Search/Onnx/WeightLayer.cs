namespace Bitbudget.Search.Onnx;

/// <summary>
/// One quantizable weight: a constant weight tensor of a Conv, ConvTranspose, Gemm or MatMul, the W or R
/// of an LSTM, GRU or RNN, or the table of a Gather (see <see cref="WeightInputs"/>). A weight
/// shared by several nodes (tied weights) is one layer with several <see cref="Consumers"/>.
/// </summary>
/// <param name="Name">Stable layer name: the first consumer's node name (unnamed nodes get one from their op and position), with ".W"/".R" appended for recurrent weights.</param>
/// <param name="Op">Operator type of the first consumer.</param>
/// <param name="WeightName">Name of the weight tensor as the consumer reads it (the graph input name in a weights-as-inputs model).</param>
/// <param name="Shape">Weight shape.</param>
/// <param name="ParameterCount">Number of weight elements.</param>
/// <param name="ChannelAxis">The output-channel axis of the weight for per-channel quantization.</param>
/// <param name="FollowedByBatchNorm">Whether an inference-mode BatchNormalization followed this layer in the uploaded model (it is folded in).</param>
/// <param name="Consumers">Names of every node that reads the weight.</param>
public sealed record WeightLayer(
    string Name,
    string Op,
    string WeightName,
    IReadOnlyList<long> Shape,
    long ParameterCount,
    int ChannelAxis,
    bool FollowedByBatchNorm,
    IReadOnlyList<string> Consumers)
{
    /// <summary>Number of output channels (the size of <see cref="ChannelAxis"/>).</summary>
    public long Channels => Shape.Count == 0 ? 1 : Shape[ChannelAxis];
}
