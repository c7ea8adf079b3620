namespace Bitbudget.Service.Engine;

/// <summary>A model input or output; a null dimension is dynamic.</summary>
/// <param name="ElementType">Lower-case element type name, e.g. "float32".</param>
internal sealed record TensorSummary(string Name, string ElementType, IReadOnlyList<long?> Shape)
{
    public static TensorSummary From(Bitbudget.Search.ValueDescription value) =>
        new(value.Name, value.ElementType.ToString().ToLowerInvariant(), value.Shape);
}
