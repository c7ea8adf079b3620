namespace Bitbudget.Search.Evaluation;

/// <summary>A stacked run did not keep its copies apart (its FP32 copy left the reference, or an output lost the copies' rows).</summary>
internal sealed class StackingMismatchException(string message) : Exception(message);
