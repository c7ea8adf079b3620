using Bitbudget.Service.Engine;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Api;

internal sealed record DatasetResponse(
    string Id,
    string Sha256,
    long Bytes,
    IReadOnlyList<ArraySummary> Arrays,
    long Samples,
    bool HasLabels,
    DateTimeOffset CreatedAt)
{
    public static DatasetResponse From(DatasetRecord dataset) =>
        new(dataset.Id, dataset.Summary.Sha256, dataset.Bytes, dataset.Summary.Arrays, dataset.Summary.Samples, dataset.Summary.HasLabels, dataset.CreatedAt);
}
