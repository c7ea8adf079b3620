using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Api;

/// <param name="Stage">reference, sweep, search, validate or export; null before the job starts.</param>
/// <param name="Summary">Set once the search has succeeded.</param>
/// <param name="Error">Why the search failed, or why the last attempt failed while it is retried.</param>
internal sealed record SearchResponse(
    string Id,
    string ModelId,
    string DatasetId,
    string State,
    string? Stage,
    ProgressResponse Progress,
    DateTimeOffset CreatedAt,
    DateTimeOffset? StartedAt,
    DateTimeOffset? FinishedAt,
    double? EtaSeconds,
    SummaryResponse? Summary,
    ErrorResponse? Error,
    SearchSpec Settings)
{
    public static SearchResponse From(SearchRecord search, ResultRecord? result) => new(
        search.Id,
        search.ModelId,
        search.DatasetId,
        search.State,
        search.Stage,
        new ProgressResponse(search.Done, search.Total),
        search.CreatedAt,
        search.StartedAt,
        search.FinishedAt,
        search.EtaSeconds,
        result is null ? null : new SummaryResponse(
            result.Bytes,
            result.AverageBits,
            result.Compression,
            result.Predicted,
            result.Measured,
            result.Feasible,
            result.Message,
            result.TrialCount,
            result is { HeldOutSamples: int samples, HeldOutMeasured: double held } ? new HeldOutResponse(samples, held, result.HeldOutMeetsBudget) : null,
            result.Warnings(),
            result.ModelFileBytes,
            result.Storage,
            result.StorageNote),
        search.ErrorCode is null ? null : new ErrorResponse(search.ErrorCode, search.ErrorMessage ?? ""),
        search.Spec);
}
