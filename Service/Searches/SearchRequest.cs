namespace Bitbudget.Service.Searches;

/// <summary>The body of POST /v1/searches; everything but the ids and the budget has a default.</summary>
/// <param name="Bits">Candidate bit widths: 2..8, 16 (half precision) or 32 (keep FP32). Default: the widths the storage tells apart (8, 16, 32 below opset 21; 4, 8, 16, 32 at 21; 2, 3, 4, 5, 6, 8 with packed storage).</param>
/// <param name="Method">"knapsack" (default) or "greedy". Every enum value is accepted in any case and echoed in lowercase.</param>
/// <param name="Scheme">"symmetric" (default) or "asymmetric".</param>
/// <param name="Granularity">"per-channel" (default) or "per-tensor".</param>
/// <param name="Clip">How each weight's clipping range is chosen: "min-max" (default), "percentile", "mse-optimal", "analytic-laplace" or "analytic-gaussian".</param>
/// <param name="Activations">Also quantize activations to 8 bits (models with opset 13 or later).</param>
/// <param name="Pin">Layers forced to one bit width.</param>
/// <param name="Exclude">Layers kept in FP32.</param>
/// <param name="TargetOpset">Raise the model to this standard opset first (from the model's own up to 22); the raise is checked in ONNX Runtime on the dataset.</param>
/// <param name="SampleAxes">The axis that holds samples, by model input name, where the default rule should not decide.</param>
/// <param name="Outputs">The model outputs the budget judges (default: every output).</param>
/// <param name="MetricSpace">"linear" (default) or "logit" (SQNR and relative MSE of probability outputs on their logits).</param>
/// <param name="HoldoutDatasetId">A second uploaded dataset the chosen assignment is checked on.</param>
/// <param name="Rounding">The roundings measured per layer and width, each width keeping the better: ["compensated"] (default, <see cref="Search.Planning.SearchSettings.DefaultRounding"/>), ["nearest"] or both.</param>
/// <param name="BiasCorrection">Correct each quantized layer's bias for the mean output shift its quantized weight causes (Nagel et al. 2019); works with either rounding. Default: <see cref="Search.Planning.SearchSettings.DefaultBiasCorrection"/> (on).</param>
/// <param name="Storage">"container" (default: sizes are what the written file stores at the model's opset) or "packed" (b-bit weights count b bits, for targets that pack sub-byte widths themselves).</param>
/// <param name="Pairs">Most layer pairs measured together for the interaction-aware prediction (0 to 64; 0 turns pair terms off). Default: see README.</param>
internal sealed record SearchRequest(
    string? ModelId,
    string? DatasetId,
    BudgetSpec? Budget,
    IReadOnlyList<int>? Bits = null,
    string? Method = null,
    string? Scheme = null,
    string? Granularity = null,
    string? Clip = null,
    bool? Activations = null,
    IReadOnlyDictionary<string, int>? Pin = null,
    IReadOnlyList<string>? Exclude = null,
    long? TargetOpset = null,
    IReadOnlyDictionary<string, int>? SampleAxes = null,
    IReadOnlyList<string>? Outputs = null,
    string? MetricSpace = null,
    string? HoldoutDatasetId = null,
    string? Storage = null,
    IReadOnlyList<string>? Rounding = null,
    int? Pairs = null,
    bool? BiasCorrection = null);
