using System.Globalization;
using Bitbudget.Service.Problems;
using Microsoft.AspNetCore.Http.HttpResults;
using Microsoft.AspNetCore.Server.Kestrel.Core;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// Long request targets (414) and oversized headers (431) answered as problems. Kestrel refuses these itself
/// with an empty body before any application code runs (its responses cannot be customised), so its own
/// limits are set well above the service's and the service's limits are checked here, where a problem+json
/// body can be written. Only a request beyond Kestrel's wider limits still gets Kestrel's bare answer.
/// </summary>
internal static class RequestSizeGate
{
    /// <summary>Longest path plus query string the service reads (Kestrel's default request line limit).</summary>
    public const int MaxTargetBytes = 8 * 1024;

    /// <summary>Most bytes of headers the service reads (Kestrel's default).</summary>
    public const int MaxHeaderBytes = 32 * 1024;

    public static WebApplicationBuilder AddRequestSizeLimits(this WebApplicationBuilder builder)
    {
        builder.WebHost.ConfigureKestrel(kestrel =>
        {
            kestrel.Limits.MaxRequestLineSize = 8 * MaxTargetBytes;
            kestrel.Limits.MaxRequestHeadersTotalSize = 4 * MaxHeaderBytes;
        });
        return builder;
    }

    public static WebApplication UseRequestSizeGate(this WebApplication app)
    {
        app.Use(async (context, next) =>
        {
            var request = context.Request;
            var target = request.Path.Value?.Length + request.PathBase.Value?.Length + request.QueryString.Value?.Length ?? 0;
            if (target > MaxTargetBytes)
            {
                await Refuse(context, StatusCodes.Status414UriTooLong, ProblemTypes.UriTooLong,
                    $"The request target is {target.ToString(CultureInfo.InvariantCulture)} characters long; this service reads at most {MaxTargetBytes.ToString(CultureInfo.InvariantCulture)}. Send long values in a JSON body instead.").ConfigureAwait(false);
                return;
            }

            var headers = 0;
            foreach (var (name, values) in request.Headers)
            {
                headers += name.Length + 4 + values.Sum(v => v?.Length ?? 0);
            }

            if (headers > MaxHeaderBytes)
            {
                await Refuse(context, StatusCodes.Status431RequestHeaderFieldsTooLarge, ProblemTypes.HeadersTooLarge,
                    $"The request headers take {headers.ToString(CultureInfo.InvariantCulture)} bytes; this service reads at most {MaxHeaderBytes.ToString(CultureInfo.InvariantCulture)}.").ConfigureAwait(false);
                return;
            }

            await next(context).ConfigureAwait(false);
        });
        return app;
    }

    private static Task Refuse(HttpContext context, int status, string code, string detail) =>
        TypedResults.Problem(detail: detail, statusCode: status, title: ProblemTypes.Title(code), type: ProblemTypes.Uri(code), instance: context.Request.Path.Value is { Length: <= 200 } path ? path : "/")
            .ExecuteAsync(context);
}
