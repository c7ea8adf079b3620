using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// A suffix session that runs <see cref="Copies"/> copies of each chunk stacked on the batch axis, each copy with its own
/// weight for the layers the cut serves (see <see cref="Onnx.GraphSlicer.StackedSuffix"/>), so one run measures several
/// widths of a layer. With one copy it is the suffix with the unperturbed weights as constants, one width per run.
/// </summary>
/// <param name="Cut">The cut the suffix starts at (0: the whole graph).</param>
/// <param name="Session">The ONNX Runtime session of the stacked suffix.</param>
/// <param name="Copies">Copies of the chunk per run.</param>
/// <param name="Layers">Names of the layers whose weights have one input per copy.</param>
/// <param name="Fp32Feeds">The FP32 weight for every per-copy weight input (the session's own values, not owned here).</param>
internal sealed record StackedSession(int Cut, InferenceSession Session, int Copies, IReadOnlySet<string> Layers, IReadOnlyDictionary<string, OrtValue> Fp32Feeds)
{
    /// <summary>The session's outputs with every weight FP32 (one copy), once run: what a trial's changed samples are counted against.</summary>
    public List<OutputTensor>? Baseline { get; set; }
}
