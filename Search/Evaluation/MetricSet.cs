namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How far a trial's outputs are from the FP32 reference outputs over the whole calibration set: pooled
/// over every model output (the top-level values), and per output (<see cref="Outputs"/>), which is what
/// a budget judges.
/// </summary>
/// <param name="RelativeMse">Noise power over signal power: sum (y~ - y)^2 / sum y^2.</param>
/// <param name="SqnrDb">-10 log10(RelativeMse), in dB; +infinity when the outputs are identical.</param>
/// <param name="Top1Agreement">Fraction (0..1) of rows whose argmax on the last axis matches the reference.</param>
/// <param name="KlDivergence">Mean KL(reference || trial) of softmax over the last axis, in nats.</param>
/// <param name="CosineSimilarity">Mean cosine similarity of output rows.</param>
/// <param name="Accuracy">Fraction (0..1) of samples whose argmax matches the label; null without labels.</param>
/// <param name="SamplesChanged">Calibration samples with any output bit changed (<see cref="SampleChanges"/>); set on sensitivity trials, null elsewhere and on trials stored before it existed.</param>
/// <param name="Outputs">The same metrics per model output, in the model's output order; empty for records stored before they were kept.</param>
public sealed record MetricSet(
    double RelativeMse,
    double SqnrDb,
    double Top1Agreement,
    double KlDivergence,
    double CosineSimilarity,
    double? Accuracy,
    int? SamplesChanged = null,
    IReadOnlyList<OutputMetrics>? Outputs = null)
{
    /// <summary>The per-output metrics; never null.</summary>
    [System.Text.Json.Serialization.JsonIgnore]
    public IReadOnlyList<OutputMetrics> PerOutput => Outputs ?? [];

    /// <summary>Value equality, per-output metrics compared element by element (a record alone would compare the list by reference).</summary>
    public bool Equals(MetricSet? other) =>
        other is not null
        && RelativeMse.Equals(other.RelativeMse)
        && SqnrDb.Equals(other.SqnrDb)
        && Top1Agreement.Equals(other.Top1Agreement)
        && KlDivergence.Equals(other.KlDivergence)
        && CosineSimilarity.Equals(other.CosineSimilarity)
        && Accuracy.Equals(other.Accuracy)
        && SamplesChanged == other.SamplesChanged
        && PerOutput.SequenceEqual(other.PerOutput);

    public override int GetHashCode() => HashCode.Combine(RelativeMse, SqnrDb, Top1Agreement, KlDivergence, CosineSimilarity, Accuracy, PerOutput.Count);
}
