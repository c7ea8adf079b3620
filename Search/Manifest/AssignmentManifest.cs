namespace Bitbudget.Search.Manifest;

/// <summary>
/// The assignment manifest: what was searched, under which budget, what each layer got and why,
/// and the totals predicted and measured. Serialised by <see cref="ManifestJson"/>; the schema is
/// docs/manifest.schema.json. <see cref="FormatVersion"/> changes when a field changes meaning.
/// <see cref="Warnings"/> repeats the search summary's warnings; <see cref="Skipped"/> lists the weights that stay FP32.
/// </summary>
public sealed record AssignmentManifest(
    int FormatVersion,
    DateTimeOffset CreatedAt,
    ManifestModel Model,
    ManifestDataset Dataset,
    ManifestSettings Settings,
    ManifestBudget Budget,
    ManifestOutcome Outcome,
    ManifestTotals? Totals,
    ManifestMetrics Reference,
    IReadOnlyList<ManifestLayer> Layers,
    ManifestExport? Export,
    int Trials,
    IReadOnlyList<string>? Warnings = null,
    IReadOnlyList<ManifestSkipped>? Skipped = null,
    ManifestHeldOut? HeldOut = null)
{
    /// <summary>
    /// The version this code writes (2: per-output metrics, budgets judged per output, held-out check, warnings;
    /// 3: sizes are the written file's, storage rule, modelFileBytes; 4: a non-finite number is the string
    /// "Infinity", "-Infinity" or "NaN" instead of null, and null only ever means absent; 5: one vocabulary:
    /// settings.pin/exclude, bits ascending, totals/heldOut.measured is the budget metric's number and .metrics every metric;
    /// 6: settings.pairs, outcome.rounds (predicted, with pairs, and measured per validation round) and outcome.pairs;
    /// settings.biasCorrection).
    /// </summary>
    public const int CurrentFormatVersion = 6;
}

/// <summary>The model searched.</summary>
/// <param name="Opset">The standard opset the search worked at (the target opset when the model was raised).</param>
/// <param name="OriginalOpset">The standard opset of the upload.</param>
/// <param name="OpsetRaise">The explicit opset raise and its check in ONNX Runtime; null when no target opset was asked for.</param>
public sealed record ManifestModel(string Name, string Sha256, long Opset, long Parameters, IReadOnlyList<string> Notes, long OriginalOpset, ManifestOpsetRaise? OpsetRaise);

/// <summary>
/// An explicit opset raise: what it rewrote and how far ONNX Runtime's FP32 outputs on the calibration set
/// moved (relative L2 difference, the figure checked against 1e-6, and the largest single element).
/// </summary>
public sealed record ManifestOpsetRaise(long From, long To, IReadOnlyList<string> Rewritten, double RelativeDifference, double MaxRelativeDifference, bool BitExact);

/// <summary>The calibration set used.</summary>
/// <param name="SampleAxes">Per model input, the axis its samples lie along; null for a constant fed unchanged to every run.</param>
/// <param name="OutputSampleAxes">Per model output, the axis its samples lie along; null for an output with one value per run.</param>
public sealed record ManifestDataset(
    int Samples,
    bool HasLabels,
    IReadOnlyDictionary<string, int?>? SampleAxes = null,
    IReadOnlyDictionary<string, int?>? OutputSampleAxes = null);

/// <summary>The search's settings, under the names the API request and the command line use.</summary>
/// <param name="Bits">Candidate bit widths, ascending.</param>
/// <param name="Pin">Layers forced to one bit width.</param>
/// <param name="Exclude">Layers kept in FP32.</param>
/// <param name="BiasCorrection">Whether quantized layers' biases were corrected for their mean output shift (warnings name the layers that could not be).</param>
public sealed record ManifestSettings(
    IReadOnlyList<int> Bits,
    string Method,
    string Scheme,
    string Granularity,
    string Clip,
    bool Activations,
    IReadOnlyDictionary<string, int> Pin,
    IReadOnlyList<string> Exclude,
    IReadOnlyList<string>? Outputs = null,
    string MetricSpace = "linear",
    string Storage = "container",
    IReadOnlyList<string>? Rounding = null,
    int Pairs = 0,
    bool BiasCorrection = false);

/// <summary>The budget: an error bound on <see cref="Metric"/> (AtLeast or AtMost) or a size bound (Bytes or AverageBits).</summary>
public sealed record ManifestBudget(string Kind, string Metric, double? AtLeast, double? AtMost, long? Bytes, double? AverageBits, string AdditiveModel);

/// <summary>Whether the budget was met, and one sentence saying how.</summary>
/// <param name="StorageNote">What the storage rule closed off (widths that save nothing, smaller choices with packed storage or opset 21); null when nothing.</param>
/// <param name="Rounds">Every assignment the validation measured, in order, predicted beside measured.</param>
/// <param name="Pairs">The pair trials behind the corrected predictions; empty when pair terms were off.</param>
public sealed record ManifestOutcome(
    bool Feasible,
    string Message,
    int ValidationRounds,
    string? StorageNote = null,
    IReadOnlyList<ManifestRound>? Rounds = null,
    IReadOnlyList<ManifestPair>? Pairs = null);

/// <summary>One validation round: an assignment measured end to end, beside what was predicted for it.</summary>
/// <param name="Bytes">Predicted size of the model file under the assignment.</param>
/// <param name="Predicted">The budget metric as the additive model predicts it.</param>
/// <param name="PredictedWithPairs">The budget metric as the additive model plus the pair terms predicts it; null when no pair term was known.</param>
/// <param name="Measured">The budget metric measured end to end (the worst judged output).</param>
/// <param name="MeetsBudget">Whether the measurement meets the budget.</param>
public sealed record ManifestRound(long Bytes, double Predicted, double? PredictedWithPairs, double Measured, bool MeetsBudget);

/// <summary>
/// A pair trial: two layers quantized together, every other layer FP32. <see cref="Term"/> is what the additive model
/// misses for the pair: the pair's additive error minus the two layers' own (in the units of budget.additiveModel).
/// </summary>
/// <param name="Measured">The budget metric of the pair trial.</param>
public sealed record ManifestPair(string First, int FirstBits, string Second, int SecondBits, double Measured, double Term);

/// <summary>Totals of the chosen assignment.</summary>
/// <param name="Bytes">Predicted size of the model file, counted by <paramref name="Storage"/>.</param>
/// <param name="Float32Bytes">Size of the model file with every weight in FP32 (BatchNormalization folded).</param>
/// <param name="Compression"><paramref name="Float32Bytes"/> over <paramref name="ModelFileBytes"/>, the written file.</param>
/// <param name="Storage">"container" (what the export writes at the model's opset) or "packed" (ideal packed bits).</param>
/// <param name="ModelFileBytes">Size of the written quantized model file.</param>
/// <param name="PredictedCompression"><paramref name="Float32Bytes"/> over <paramref name="Bytes"/>.</param>
/// <param name="Predicted">The budget metric as the additive model predicts it; null when infinite (SQNR of an assignment with no predicted error, e.g. every layer kept FP32).</param>
/// <param name="Metrics">Every metric, measured end to end (pooled over outputs, and per output).</param>
/// <param name="Measured">The budget metric measured end to end and judged: the worst judged output's value (the search summary's <c>measured</c>); null when infinite.</param>
/// <param name="BindingOutput">The judged output that gave <paramref name="Measured"/>; null when the metric is not per output.</param>
public sealed record ManifestTotals(
    long Bytes,
    long Float32Bytes,
    double AverageBits,
    double Compression,
    double? Predicted,
    ManifestMetrics Metrics,
    double? Measured = null,
    string? BindingOutput = null,
    string Storage = "container",
    long? ModelFileBytes = null,
    double PredictedCompression = 0);

/// <summary>The chosen assignment run on a second, held-out dataset, beside the calibration figures.</summary>
/// <param name="Samples">Samples in the held-out set.</param>
/// <param name="Measured">The budget metric on the held-out set, judged as on the calibration set; null when infinite.</param>
/// <param name="BindingOutput">The judged output that gave <paramref name="Measured"/>.</param>
/// <param name="Metrics">Every metric on the held-out set.</param>
/// <param name="MeetsBudget">Whether the held-out figure meets the error budget; null for a size budget.</param>
public sealed record ManifestHeldOut(
    int Samples,
    double? Measured,
    string? BindingOutput,
    bool? MeetsBudget,
    ManifestMetrics Metrics);

/// <summary>One output's metrics; <see cref="Judged"/> says whether the budget looks at it.</summary>
public sealed record ManifestOutputMetrics(
    string Name,
    bool Judged,
    double RelativeMse,
    double? SqnrDb,
    double Top1Agreement,
    double KlDivergence,
    double CosineSimilarity);

/// <summary>Output metrics as stored in the manifest (SQNR in dB; infinity written as null).</summary>
public sealed record ManifestMetrics(
    double RelativeMse,
    double? SqnrDb,
    double Top1Agreement,
    double KlDivergence,
    double CosineSimilarity,
    double? Accuracy,
    IReadOnlyList<ManifestOutputMetrics>? Outputs = null);

/// <summary>One layer: what it is, what it got, and how sensitive it was at each candidate.</summary>
/// <param name="Activations">The 8-bit quantization of the layer's input activation, one per consumer node; null when activations stay FP32.</param>
/// <param name="Coverage">Whether the calibration set reaches the layer; null for excluded layers.</param>
/// <param name="Rounding">How the chosen width's integers were rounded ("nearest" or "compensated").</param>
public sealed record ManifestLayer(
    string Name,
    string Op,
    string Weight,
    IReadOnlyList<long> Shape,
    long Parameters,
    int? Bits,
    string Scheme,
    string Granularity,
    int Axis,
    string Clip,
    long Bytes,
    bool Excluded,
    bool Pinned,
    IReadOnlyList<ManifestSensitivity> Sensitivity,
    IReadOnlyList<ManifestActivation>? Activations = null,
    ManifestCoverage? Coverage = null,
    string Rounding = "nearest");

/// <summary>Whether the calibration set reaches a layer, judged from its sensitivity trials.</summary>
/// <param name="Status">"exercised", "barely-exercised" (fewer than 1% of samples changed at every width) or "not-exercised" (no output bit changed at any width).</param>
/// <param name="SamplesChanged">Most samples with any output bit changed by one of the layer's trials; null when unknown.</param>
/// <param name="Samples">Calibration samples.</param>
/// <param name="Reason">Why the layer is flagged and what was done (it keeps its highest candidate width or pin); null when exercised.</param>
public sealed record ManifestCoverage(string Status, int? SamplesChanged, int Samples, string? Reason);

/// <summary>A weight that stays FP32 because the engine does not quantize it.</summary>
public sealed record ManifestSkipped(string Node, string Op, string Input, long Parameters, string Reason);

/// <summary>Per-tensor uint8 quantization of the activation <see cref="Tensor"/> that node <see cref="Consumer"/> reads.</summary>
public sealed record ManifestActivation(string Consumer, string Tensor, float Scale, int ZeroPoint);

/// <summary>A sensitivity trial: the layer alone at <see cref="Bits"/>.</summary>
/// <param name="AdditiveError">What this choice adds to the additive error model.</param>
/// <param name="Rounding">The rounding kept at this width (the measured one with the least additive error).</param>
public sealed record ManifestSensitivity(int Bits, long Bytes, double AdditiveError, ManifestMetrics Metrics, string Rounding = "nearest");

/// <summary>How the quantized model was written.</summary>
/// <param name="Format">"qdq": integer weight initializers turned into FP32 by DequantizeLinear or, where the opset lacks it, by Cast/Sub/Mul.</param>
public sealed record ManifestExport(string Format, long Opset, string? Note);
