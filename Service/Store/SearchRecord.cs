using Bitbudget.Service.Searches;

namespace Bitbudget.Service.Store;

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
    DateTimeOffset? LeaseUntil);
