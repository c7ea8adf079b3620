namespace Bitbudget.Search.Onnx;

/// <summary>Either the constant behind a value, or why there is none (a sentence fragment for the notes).</summary>
internal readonly record struct ValueResolution(WeightSource? Source, string? Reason);
