using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>Everything a search needs besides the model and the calibration set.</summary>
/// <param name="Budget">The error or size budget.</param>
/// <param name="Bits">Candidate bit widths (2..8, 16 for FP16, 32 to keep FP32); empty for the widths the storage tells apart (<see cref="CandidateWidths.Defaults"/>).</param>
/// <param name="Pins">Layers forced to one bit width, by layer name.</param>
/// <param name="Excluded">Layers kept in FP32 and left out of the search, by layer name.</param>
/// <param name="QuantizeActivations">Per-tensor 8-bit activations on the inputs of quantized layers (opset 13 or later).</param>
/// <param name="TargetOpset">Raise the model to this standard opset before searching (see <see cref="Onnx.OnnxModel.Load(byte[], string, long?)"/>); null keeps the upload's opset.</param>
/// <param name="Outputs">The model outputs the budget judges, by name; null or empty for every output.</param>
/// <param name="MetricSpace">Where SQNR and relative MSE are computed (linear, or logit for probability outputs).</param>
/// <param name="SampleAxes">Sample axes given outright, by input name (see <see cref="Evaluation.CalibrationSet"/>); recorded in the manifest.</param>
/// <param name="Storage">How sizes are counted: what the export writes (default) or ideal packed bits.</param>
/// <param name="Rounding">The roundings measured per layer and width (<see cref="RoundingChoices"/>); null or empty for nearest only
/// (the engine does what it is told; the command line and the API fill in <see cref="DefaultRounding"/>).</param>
/// <param name="Pairs">
/// Most layer pairs measured together for the interaction-aware prediction (<see cref="PairwiseModel"/>, <see cref="PairRanking"/>);
/// each pair costs one or two extra trials. 0 turns pair terms off (the additive model alone). Error budgets only.
/// </param>
/// <param name="BiasCorrection">Correct each quantized layer's bias for its mean output shift (Nagel et al. 2019), with either rounding.</param>
public sealed record SearchSettings(
    Budget Budget,
    IReadOnlyList<int> Bits,
    SearchMethod Method = SearchMethod.Knapsack,
    QuantizationScheme Scheme = QuantizationScheme.Symmetric,
    Granularity Granularity = Granularity.PerChannel,
    ClipMethod Clip = ClipMethod.MinMax,
    bool QuantizeActivations = false,
    IReadOnlyDictionary<string, int>? Pins = null,
    IReadOnlyList<string>? Excluded = null,
    long? TargetOpset = null,
    IReadOnlyList<string>? Outputs = null,
    Evaluation.MetricSpace MetricSpace = Evaluation.MetricSpace.Linear,
    IReadOnlyDictionary<string, int>? SampleAxes = null,
    StorageRule Storage = StorageRule.Container,
    IReadOnlyList<RoundingMethod>? Rounding = null,
    int Pairs = SearchSettings.DefaultPairs,
    bool BiasCorrection = false)
{
    /// <summary>The pairs measured when none is said (see the benchmark in DEVELOPERS.md).</summary>
    public const int DefaultPairs = 0;

    /// <summary>The most pairs a search may ask for: the trials stay a small part of a sweep's.</summary>
    public const int MaxPairs = 64;

    /// <summary>
    /// Whether bias correction is on when a request or the command line does not say: on, because with compensated
    /// rounding it gave the smallest plans at sqnr>=30 on the demo and the OCR models (DEVELOPERS.md, "Rounding: nearest
    /// against compensated").
    /// </summary>
    public const bool DefaultBiasCorrection = true;

    /// <summary>
    /// The roundings measured when a request or the command line does not say: compensated alone, which costs one trial
    /// per width like nearest and is never worse than nearest per block on the calibration inputs (same benchmark).
    /// </summary>
    public static IReadOnlyList<RoundingMethod> DefaultRounding { get; } = [RoundingMethod.Compensated];

    /// <summary>The candidate widths most teams start from when sub-byte widths are packed (common practice).</summary>
    public static IReadOnlyList<int> DefaultBits { get; } = [2, 3, 4, 5, 6, 8];
}
