namespace Bitbudget.Search.Onnx;

/// <summary>
/// Names of the tensors an export adds for a weight or an activation: the name of what they belong to, a
/// '#' and the part's role, e.g. "conv1.weight#levels" (the integer levels), "conv1.weight#scale",
/// "conv1.weight#zero-point". The weight's own name stays the FP32 value the consumers read, so a reader of
/// the written model finds every part of a quantized weight by its name.
/// </summary>
internal static class DerivedNames
{
    /// <summary>Between the owner's name and the role; rare in exporters' names, so a derived name reads as one.</summary>
    public const char Separator = '#';

    public static string Of(string owner, string role) => owner + Separator + role;
}
