using Bitbudget.Service.Engine;

namespace Bitbudget.Service.Store;

internal sealed record DatasetRecord(string Id, long Bytes, DatasetSummary Summary, DateTimeOffset CreatedAt);
