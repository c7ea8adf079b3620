namespace Bitbudget.Service.Api;

/// <summary>The totals of a comparison.</summary>
/// <param name="Bytes">Predicted model file size on each side (null for an infeasible search).</param>
/// <param name="ModelFileBytes">Size of the written quantized model file on each side.</param>
/// <param name="Measured">The budget metric measured end to end on each side (comparable only when both use the same metric).</param>
/// <param name="Parameters">Weights in quantizable layers on each side.</param>
internal sealed record ComparisonTotals(
    ComparedValue Bytes,
    ComparedValue ModelFileBytes,
    ComparedValue AverageBits,
    ComparedValue Measured,
    ComparedValue Parameters,
    int ChangedLayers,
    int AddedLayers,
    int RemovedLayers);
