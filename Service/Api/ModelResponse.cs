using Bitbudget.Service.Engine;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Api;

/// <param name="Version">1 for the first model uploaded under <paramref name="Name"/>, counting by upload time (GET /v1/models?name= lists them).</param>
internal sealed record ModelResponse(
    string Id,
    string Sha256,
    string Name,
    long Bytes,
    long Opset,
    IReadOnlyList<TensorSummary> Inputs,
    IReadOnlyList<TensorSummary> Outputs,
    IReadOnlyList<LayerSummary> Layers,
    IReadOnlyList<string> Notes,
    IReadOnlyList<Bitbudget.Search.Onnx.SkippedWeight> Skipped,
    DateTimeOffset CreatedAt,
    int Version)
{
    public static ModelResponse From(ModelRecord model, int version)
    {
        var s = model.Summary;
        return new(model.Id, s.Sha256, s.Name, s.Bytes, s.Opset, s.Inputs, s.Outputs, s.Layers, s.Notes, s.Skipped ?? [], model.CreatedAt, version);
    }
}
