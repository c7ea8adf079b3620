namespace Bitbudget.Search.Onnx;

/// <summary>
/// A weight that stays FP32 because the engine does not quantize it: a layer op whose weight is computed at
/// run time (a MatMul of two activations), or a sizeable FP32 constant read by an operator without a
/// quantized form here. Biases and other one-dimensional vectors are not listed.
/// </summary>
/// <param name="Node">The reading node's name (scoped inside If/Loop/Scan bodies as layer names are).</param>
/// <param name="Op">The reading node's operator type.</param>
/// <param name="Input">The input the node reads the weight through.</param>
/// <param name="Parameters">Number of FP32 values kept (0 when the weight is computed at run time).</param>
/// <param name="Reason">Why it stays FP32, one sentence.</param>
public sealed record SkippedWeight(string Node, string Op, string Input, long Parameters, string Reason);
