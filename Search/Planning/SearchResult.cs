namespace Bitbudget.Search.Planning;

/// <summary>
/// What a finished search hands back: whether the budget could be met, a one-sentence summary, and
/// the artifacts ready to store and serve.
/// </summary>
/// <param name="Feasible">False when even the highest candidate on every layer misses the budget.</param>
/// <param name="Message">One sentence, with numbers (e.g. "8 bits everywhere gives 27.4 dB; budget 30 dB").</param>
/// <param name="ManifestJson">The assignment manifest (UTF-8 JSON, see docs/manifest.schema.json).</param>
/// <param name="QuantizedModel">The quantized ONNX model; null when infeasible.</param>
/// <param name="SensitivityCsv">The per-layer, per-bit-width sensitivity table.</param>
/// <param name="FrontierJson">The size-vs-error Pareto frontier.</param>
/// <param name="Bytes">Predicted size of the model file under the chosen assignment, counted by the storage rule.</param>
/// <param name="AverageBits">Average stored bits per quantizable weight (scales, zero points and nodes included).</param>
/// <param name="Compression">Size of the FP32 model file over the size of the written quantized file.</param>
/// <param name="PredictedError">The budget metric as the additive model predicts it.</param>
/// <param name="MeasuredError">The budget metric as measured end to end, judged on the worst judged output.</param>
/// <param name="Warnings">Sentences saying where a figure is weaker than it looks (layers the calibration set does not exercise, few samples carrying an output's power, a held-out miss).</param>
/// <param name="HeldOutSamples">Samples in the held-out set; null when there was none.</param>
/// <param name="HeldOutMeasured">The budget metric on the held-out set, judged as <paramref name="MeasuredError"/>; null without one.</param>
/// <param name="HeldOutMeetsBudget">Whether the held-out figure meets the error budget; null without one or for a size budget.</param>
/// <param name="ModelFileBytes">Size of the written quantized model file; null when none was written.</param>
/// <param name="Storage">How <paramref name="Bytes"/> was counted: "container" (what the export writes) or "packed".</param>
/// <param name="StorageNote">What the storage rule closed off (widths that save nothing, smaller choices under packed storage or opset 21); null when nothing.</param>
public sealed record SearchResult(
    bool Feasible,
    string Message,
    byte[] ManifestJson,
    byte[]? QuantizedModel,
    string SensitivityCsv,
    string FrontierJson,
    long Bytes,
    double AverageBits,
    double Compression,
    double PredictedError,
    double MeasuredError,
    int TrialCount,
    IReadOnlyList<string>? Warnings = null,
    int? HeldOutSamples = null,
    double? HeldOutMeasured = null,
    bool? HeldOutMeetsBudget = null,
    long? ModelFileBytes = null,
    string Storage = "container",
    string? StorageNote = null,
    string? SweepNote = null);
