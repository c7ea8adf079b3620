namespace Bitbudget.Search;

/// <summary>
/// A named model input or output: its element type and shape. A null dimension is dynamic
/// (a symbolic or missing size in the model).
/// </summary>
public sealed record ValueDescription(string Name, ElementType ElementType, IReadOnlyList<long?> Shape);
