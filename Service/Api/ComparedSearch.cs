namespace Bitbudget.Service.Api;

/// <summary>One side of a comparison: which search, of which model version, and its headline figures.</summary>
/// <param name="ModelVersion">1 for the first model uploaded under <paramref name="ModelName"/>, counting by upload time.</param>
/// <param name="Metric">The budget metric's wire name; <paramref name="Measured"/> is in it.</param>
internal sealed record ComparedSearch(
    string SearchId,
    string ModelId,
    string ModelName,
    int ModelVersion,
    string Metric,
    bool Feasible,
    double? Measured);
