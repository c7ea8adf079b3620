namespace Bitbudget.Service.Searches;

/// <summary>A validated search request with every default filled in, as the store keeps it and the API echoes it.</summary>
/// <param name="Bits">The candidate widths as given; null for the widths the storage tells apart at the model's opset (the manifest lists them).</param>
/// <param name="Storage">"container" (sizes as the export writes them) or "packed" (ideal packed bits).</param>
/// <param name="Rounding">The roundings measured ("nearest", "compensated"); null (stored before the option existed) means nearest.</param>
/// <param name="Pairs">Most layer pairs measured together; null (stored before the option existed) means none.</param>
/// <param name="BiasCorrection">Whether quantized layers' biases are corrected; false for searches stored before the option existed.</param>
internal sealed record SearchSpec(
    BudgetSpec Budget,
    IReadOnlyList<int>? Bits,
    string Method,
    string Scheme,
    string Granularity,
    string Clip,
    bool Activations,
    IReadOnlyDictionary<string, int> Pin,
    IReadOnlyList<string> Exclude,
    long? TargetOpset = null,
    IReadOnlyDictionary<string, int>? SampleAxes = null,
    IReadOnlyList<string>? Outputs = null,
    string MetricSpace = "linear",
    string? HoldoutDatasetId = null,
    string Storage = "container",
    IReadOnlyList<string>? Rounding = null,
    int? Pairs = null,
    bool BiasCorrection = false);
