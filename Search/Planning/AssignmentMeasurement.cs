using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>A whole assignment measured end to end (a validation trial).</summary>
/// <param name="Assignment">Setting per searched layer, by layer name.</param>
/// <param name="Hash">The assignment's SHA-256, the trial's identity.</param>
/// <param name="Bytes">Weight bytes of every layer under this assignment (excluded layers at FP32).</param>
/// <param name="PredictedAdditive">Sum of the layers' additive errors.</param>
/// <param name="PredictedCorrected">The additive sum plus the measured pair terms (<see cref="PairwiseModel"/>); null when no pair term was known.</param>
internal sealed record AssignmentMeasurement(
    IReadOnlyDictionary<string, LayerSetting> Assignment,
    string Hash,
    long Bytes,
    double PredictedAdditive,
    MetricSet Measured,
    bool MeetsBudget,
    double? PredictedCorrected = null);
