using Bitbudget.Service.Searches;

namespace Bitbudget.Service.Store;

/// <param name="Attempts">Runs that took the search (restarts after a crash included), for the log.</param>
/// <param name="Failures">Runs that ended in an error of the search itself; these, not restarts, use up the retry budget.</param>
internal sealed record SearchRecord(
    string Id,
    string ModelId,
    string DatasetId,
    SearchSpec Spec,
    string State,
    string? Stage,
    int Done,
    int Total,
    double? EtaSeconds,
    string? ErrorCode,
    string? ErrorMessage,
    string? JobId,
    int Attempts,
    string? IdempotencyKey,
    string RequestHash,
    DateTimeOffset CreatedAt,
    DateTimeOffset? StartedAt,
    DateTimeOffset? FinishedAt,
    DateTimeOffset? LeaseUntil,
    int Failures);
