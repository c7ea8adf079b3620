using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Api;

internal sealed record TrialPageResponse(long Total, int Offset, int Limit, IReadOnlyList<TrialRecord> Items);
