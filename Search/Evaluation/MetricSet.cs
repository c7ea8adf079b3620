namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How far a trial's outputs are from the FP32 reference outputs, over the whole calibration set and
/// every model output.
/// </summary>
/// <param name="RelativeMse">Noise power over signal power: sum (y~ - y)^2 / sum y^2.</param>
/// <param name="SqnrDb">-10 log10(RelativeMse), in dB; +infinity when the outputs are identical.</param>
/// <param name="Top1Agreement">Fraction (0..1) of rows whose argmax on the last axis matches the reference.</param>
/// <param name="KlDivergence">Mean KL(reference || trial) of softmax over the last axis, in nats.</param>
/// <param name="CosineSimilarity">Mean cosine similarity of output rows.</param>
/// <param name="Accuracy">Fraction (0..1) of samples whose argmax matches the label; null without labels.</param>
/// <param name="SamplesChanged">Calibration samples with any output bit changed (<see cref="SampleChanges"/>); set on sensitivity trials, null elsewhere and on trials stored before it existed.</param>
public sealed record MetricSet(
    double RelativeMse,
    double SqnrDb,
    double Top1Agreement,
    double KlDivergence,
    double CosineSimilarity,
    double? Accuracy,
    int? SamplesChanged = null);
