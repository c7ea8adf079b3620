using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Planning;

/// <summary>
/// One measured trial, as stored. <see cref="Key"/> is stable across runs of the same search
/// (kind, layer, bits, scheme and assignment hash), so a restarted search skips what it has.
/// </summary>
/// <param name="Kind">"reference", "sensitivity" or "validation".</param>
/// <param name="AssignmentHash">SHA-256 (hex) of the whole assignment for validations; null otherwise.</param>
public sealed record TrialRecord(
    string Key,
    string Kind,
    string? Layer,
    int? Bits,
    string? AssignmentHash,
    MetricSet Metrics,
    double DurationMs);
