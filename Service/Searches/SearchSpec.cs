namespace Bitbudget.Service.Searches;

/// <summary>A validated search request with every default filled in, as the store keeps it and the API echoes it.</summary>
internal sealed record SearchSpec(
    BudgetSpec Budget,
    IReadOnlyList<int> Bits,
    string Method,
    string Scheme,
    string Granularity,
    string Calibration,
    bool Activations,
    IReadOnlyDictionary<string, int> Pin,
    IReadOnlyList<string> Exclude,
    long? TargetOpset = null,
    IReadOnlyDictionary<string, int>? SampleAxes = null,
    IReadOnlyList<string>? Outputs = null,
    string MetricSpace = "linear",
    string? HoldoutDatasetId = null);
