namespace Bitbudget.Service.Api;

/// <param name="Code">Stable kebab-case cause, the same as the problem type's last segment.</param>
internal sealed record ErrorResponse(string Code, string Message);
