using Microsoft.AspNetCore.Mvc;

namespace Bitbudget.Service.Problems;

/// <summary>The 503 a write gets while the data folder cannot be written: nothing was stored, retrying later is safe.</summary>
internal static class StoreUnavailableResponse
{
    /// <summary>Seconds a client should wait before retrying (RFC 9110 section 10.2.3, Retry-After).</summary>
    public const int RetryAfterSeconds = 30;

    public static void Prepare(HttpContext context)
    {
        context.Response.StatusCode = StatusCodes.Status503ServiceUnavailable;
        context.Response.Headers.RetryAfter = RetryAfterSeconds.ToString(System.Globalization.CultureInfo.InvariantCulture);
    }

    public static ProblemDetails Problem(string fault) => new()
    {
        Status = StatusCodes.Status503ServiceUnavailable,
        Type = ProblemTypes.Uri(ProblemTypes.StoreUnavailable),
        Title = ProblemTypes.Title(ProblemTypes.StoreUnavailable),
        Detail = $"The service cannot store anything right now: {fault}. Nothing was stored; retry once the data folder has free space and is writable (GET /healthz says when).",
    };
}
