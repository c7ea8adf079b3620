namespace Bitbudget.Search.Onnx;

/// <summary>A model as uploaded and as raised to a later opset, both serialized before normalisation.</summary>
internal sealed record RaisedGraphs(byte[] Original, byte[] Raised);
