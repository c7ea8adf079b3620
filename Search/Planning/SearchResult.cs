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
/// <param name="Bytes">Weight bytes of the chosen assignment.</param>
/// <param name="AverageBits">Average bits per quantizable weight.</param>
/// <param name="Compression">FP32 bytes over chosen bytes.</param>
/// <param name="PredictedError">The budget metric as the additive model predicts it.</param>
/// <param name="MeasuredError">The budget metric as measured end to end.</param>
/// <param name="Warnings">Sentences the user should read before trusting the result, e.g. each layer the calibration set does not exercise (kept at its highest candidate width).</param>
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
    IReadOnlyList<string>? Warnings = null);
