namespace Bitbudget.Service.Engine;

/// <summary>What the engine found in an uploaded model.</summary>
/// <param name="Sha256">Lower-case hex SHA-256 of the uploaded bytes.</param>
/// <param name="Bytes">Size of the upload in bytes.</param>
/// <param name="Notes">Sentences about what was skipped or folded, and why.</param>
/// <param name="Skipped">Weights that stay FP32 (op, parameter count, reason); null for models stored before the list existed.</param>
internal sealed record ModelSummary(
    string Sha256,
    string Name,
    long Bytes,
    long Opset,
    IReadOnlyList<TensorSummary> Inputs,
    IReadOnlyList<TensorSummary> Outputs,
    IReadOnlyList<LayerSummary> Layers,
    IReadOnlyList<string> Notes,
    IReadOnlyList<Bitbudget.Search.Onnx.SkippedWeight>? Skipped = null);
