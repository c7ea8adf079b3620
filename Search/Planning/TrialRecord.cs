using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// One measured trial, as stored, and as the API's trial pages and the command line's trials.json give it.
/// <see cref="Key"/> is stable across runs of the same search (kind, layer, setting and assignment hash), so a
/// restarted search skips what it has. <see cref="Assignment"/> and <see cref="Activations"/> say everything
/// that was measured, so any trial can be run again from its record and the search's model and dataset.
/// </summary>
/// <param name="Kind">"reference", "sensitivity", "validation" or "pair" (two layers quantized together, see <see cref="PairwiseModel"/>).</param>
/// <param name="AssignmentHash">SHA-256 (hex) of the whole assignment for validations; null otherwise.</param>
/// <param name="Assignment">
/// The setting (bits, scheme, granularity, clip, ...) of every quantized layer, by layer name; a layer not
/// listed stayed FP32. Empty for the reference, one layer for a sensitivity trial, two for a pair trial, every searched
/// layer for a validation. Null for trials stored before assignments were kept.
/// </param>
/// <param name="Activations">How layer inputs were quantized to 8 bits ("min-max", "percentile"); null when they stayed FP32.</param>
/// <param name="ReusedFrom">
/// Where a trial this search did not measure itself came from: the service gives the id of the earlier search that
/// measured it (same model, dataset and settings), the command line the trial cache file; null for a trial measured
/// by this search. The engine never reads it: a reused trial counts like any other.
/// </param>
public sealed record TrialRecord(
    string Key,
    string Kind,
    string? Layer,
    int? Bits,
    string? AssignmentHash,
    MetricSet Metrics,
    double DurationMs,
    IReadOnlyDictionary<string, LayerSetting>? Assignment = null,
    ActivationCalibration? Activations = null,
    string? ReusedFrom = null);
