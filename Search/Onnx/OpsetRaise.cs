namespace Bitbudget.Search.Onnx;

/// <summary>What an explicit opset raise did to a model (see <see cref="OnnxModel.Load(byte[], string, long?)"/>).</summary>
/// <param name="FromOpset">The standard opset the upload imported.</param>
/// <param name="ToOpset">The opset the model was raised to.</param>
/// <param name="Rewritten">One sentence per node whose operator changed signature or meaning in between, saying how it was rewritten.</param>
public sealed record OpsetRaise(long FromOpset, long ToOpset, IReadOnlyList<string> Rewritten);
