using Bitbudget.Service.Engine;

namespace Bitbudget.Service.Store;

internal sealed record ModelRecord(string Id, ModelSummary Summary, DateTimeOffset CreatedAt);
