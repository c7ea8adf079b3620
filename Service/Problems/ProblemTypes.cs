namespace Bitbudget.Service.Problems;

/// <summary>
/// Stable problem types (RFC 9457): one URI per cause under one base. Engine error codes map straight
/// to <c>Base + code</c>; the service's own causes are listed here.
/// </summary>
internal static class ProblemTypes
{
    public const string Base = "https://bitbudget.dev/problems/";

    public const string InvalidRequest = "invalid-request";
    public const string NotFound = "not-found";
    public const string Unauthorized = "unauthorized";
    public const string PayloadTooLarge = "payload-too-large";
    public const string SearchNotReady = "search-not-ready";
    public const string SearchFinished = "search-finished";
    public const string BudgetInfeasible = "budget-infeasible";
    public const string IdempotencyKeyReused = "idempotency-key-reused";
    public const string MethodNotAllowed = "method-not-allowed";
    public const string UnsupportedMediaType = "unsupported-media-type";
    public const string UriTooLong = "uri-too-long";
    public const string HeadersTooLarge = "headers-too-large";
    public const string Timeout = "request-timeout";
    public const string Unhealthy = "unhealthy";
    public const string StoreUnavailable = "store-unavailable";
    public const string InternalError = "internal-error";

    public static string Uri(string code) => Base + code;

    /// <summary>A title derived from the code ("model-already-quantized" gives "Model already quantized"), so every code has one.</summary>
    public static string Title(string code)
    {
        var words = code.Replace('-', ' ');
        return words.Length == 0 ? "Error" : char.ToUpperInvariant(words[0]) + words[1..];
    }

    /// <summary>The problem code for a status the framework produced on its own (no route, no auth...).</summary>
    public static string ForStatus(int status) => status switch
    {
        400 => InvalidRequest,
        401 => Unauthorized,
        404 => NotFound,
        405 => MethodNotAllowed,
        413 => PayloadTooLarge,
        414 => UriTooLong,
        415 => UnsupportedMediaType,
        431 => HeadersTooLarge,
        503 => Unhealthy,
        504 => Timeout,
        _ => status >= 500 ? InternalError : InvalidRequest,
    };
}
