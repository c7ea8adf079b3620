namespace Bitbudget.Service.Engine;

/// <summary>A model input or output; a null dimension is dynamic.</summary>
/// <param name="ElementType">Lower-case element type name, e.g. "float32".</param>
internal sealed record TensorSummary(string Name, string ElementType, IReadOnlyList<long?> Shape);
