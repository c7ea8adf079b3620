namespace Bitbudget.Search.Evaluation;

/// <summary>ONNX Runtime's FP32 outputs of a model before and after its opset raise, compared on the calibration set.</summary>
/// <param name="FromOpset">The upload's opset.</param>
/// <param name="ToOpset">The raised opset.</param>
/// <param name="Outputs">One entry per model output.</param>
public sealed record OpsetRaiseComparison(long FromOpset, long ToOpset, IReadOnlyList<OutputDifference> Outputs)
{
    /// <summary>The largest relative (L2) difference over every output, the figure the check gates on; 0 when bit for bit equal.</summary>
    public double RelativeDifference => Outputs.Count == 0 ? 0 : Outputs.Max(o => o.RelativeDifference);

    /// <summary>The largest single-element difference over every output, relative to that output's largest magnitude.</summary>
    public double MaxRelativeDifference => Outputs.Count == 0 ? 0 : Outputs.Max(o => o.MaxRelativeDifference);

    /// <summary>True when every output is bit for bit the same.</summary>
    public bool BitExact => Outputs.All(o => o.BitExact);
}
