using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Planning;

/// <summary>The chosen assignment measured on a held-out dataset: its FP32 reference and the quantized run.</summary>
internal sealed record HeldOutCheck(int Samples, MetricSet Reference, MetricSet Measured);
