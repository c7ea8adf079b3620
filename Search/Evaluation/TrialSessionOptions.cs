using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Evaluation;

/// <summary>Knobs of a <see cref="TrialSession"/>.</summary>
/// <param name="MaxBatch">Most samples per run when the model's batch dimension is dynamic.</param>
/// <param name="SuffixRuns">Allow running only the part of the graph downstream of a perturbed layer.</param>
/// <param name="MaxCachedActivationBytes">Most memory the cached cut-set activations (and kept percentile samples) may take, whatever <paramref name="MaxSweepMemoryBytes"/> leaves them.</param>
/// <param name="IntraOpThreads">ONNX Runtime intra-op threads; null lets ONNX Runtime choose.</param>
/// <param name="Activations">Calibration of 8-bit activations on the inputs of quantized layers; null for weights only.</param>
/// <param name="MetricSpace">Where SQNR and relative MSE are computed (see <see cref="Evaluation.MetricSpace"/>).</param>
/// <param name="FixedActivations">Activation scales and zero points to use as given instead of calibrating them on this
/// session's data (a held-out check must quantize activations exactly as the calibration set did).</param>
/// <param name="Rounder">Where weights set to compensated rounding get their integers; null when every weight is rounded to nearest.</param>
/// <param name="MaxSweepMemoryBytes">Memory a sweep plans for: it bounds the samples per run and the activations cached at
/// cut points (see <see cref="SweepMemory"/>), so the sweep's memory no longer grows with the calibration set beyond the data itself.</param>
/// <param name="CutEveryLayer">Cut at every layer's own position instead of the planned shared cuts (tests of suffix runs use it).</param>
/// <param name="ConstantSuffixes">Measure a layer's widths on suffix sessions whose unperturbed weights are constants (ONNX Runtime
/// folds and pre-packs them), with <paramref name="MaxWidthsPerRun"/> widths stacked on the batch axis where the model's batch is free
/// (see <see cref="TrialSession.MeasureLayerWidths"/>). Off (the default): one width per run on the weights-as-inputs graph,
/// bit for bit whatever cut a trial runs from. On, a trial's metrics move by rounding with the cut it runs from (within 0.01 dB
/// on the OCR classifier), so a resumed or cached sweep is no longer bit for bit an uninterrupted one: measured, not the default.</param>
/// <param name="MaxWidthsPerRun">Most widths one stacked run holds under <paramref name="ConstantSuffixes"/>; 1 (the default) runs
/// one width per run. Stacking measured slower on the OCR classifier (its runs are compute-bound, and a stacked batch adds
/// Split, Concat and tiling copies and loses cache locality; DEVELOPERS.md).</param>
public sealed record TrialSessionOptions(
    int MaxBatch = 32,
    bool SuffixRuns = true,
    long MaxCachedActivationBytes = 512L << 20,
    int? IntraOpThreads = null,
    ActivationCalibration? Activations = null,
    MetricSpace MetricSpace = MetricSpace.Linear,
    IReadOnlyList<ActivationQuantization>? FixedActivations = null,
    WeightRounder? Rounder = null,
    long MaxSweepMemoryBytes = TrialSessionOptions.DefaultMaxSweepMemoryBytes,
    bool CutEveryLayer = false,
    bool ConstantSuffixes = false,
    int MaxWidthsPerRun = 1)
{
    /// <summary>1 GiB: the OCR detector's sweep on 32 images fits in it.</summary>
    public const long DefaultMaxSweepMemoryBytes = 1L << 30;
}
