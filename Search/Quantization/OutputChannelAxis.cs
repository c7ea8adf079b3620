namespace Bitbudget.Search.Quantization;

/// <summary>The output-channel axis of a layer's weight, per the ONNX operator's weight layout.</summary>
public static class OutputChannelAxis
{
    /// <summary>
    /// Conv W is [M, C/g, k...]: axis 0. ConvTranspose W is [C, M/g, k...]: axis 1. Gemm B is [K, N], or [N, K]
    /// with transB = 1: axis 1 or 0. MatMul B is [..., K, N]: the last axis.
    /// </summary>
    public static int For(string opType, int weightRank, bool transB = false)
    {
        ArgumentNullException.ThrowIfNull(opType);
        int axis = opType switch
        {
            "Conv" => 0,
            "ConvTranspose" => 1,
            "Gemm" => transB ? 0 : 1,
            "MatMul" => weightRank - 1,
            _ => throw new EngineException("operator-not-quantizable", $"Operator '{opType}' has no weight the engine quantizes; only Conv, ConvTranspose, Gemm and MatMul do."),
        };

        if (axis < 0 || axis >= weightRank)
        {
            throw new EngineException("weight-rank-unexpected", $"A {opType} weight of rank {weightRank} has no output-channel axis {axis}.");
        }

        return axis;
    }
}
