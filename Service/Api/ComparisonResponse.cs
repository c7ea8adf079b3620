namespace Bitbudget.Service.Api;

/// <summary>GET /v1/searches/{id}/compare/{other}: two searches side by side, layer by layer; every change is other - base.</summary>
/// <param name="SameModelName">Whether both searched versions of one model name (a retrain); layers of unrelated models rarely match.</param>
internal sealed record ComparisonResponse(
    ComparedSearch Base,
    ComparedSearch Other,
    bool SameModelName,
    IReadOnlyList<ComparedLayer> Layers,
    ComparisonTotals Totals);
