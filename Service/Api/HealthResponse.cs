namespace Bitbudget.Service.Api;

internal sealed record HealthResponse(string Status, string Store, string Queue);
