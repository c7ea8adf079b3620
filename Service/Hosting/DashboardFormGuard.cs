using Bitbudget.Service.Problems;
using Microsoft.AspNetCore.Http.HttpResults;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// The Hangfire dashboard's POST endpoints (/jobs/stats, the retry and delete buttons) read a form and throw
/// on any other body, which came out as a 500. Refuse such a body first, with a 415 problem that says what
/// the dashboard takes; only reached after the API key check.
/// </summary>
internal static class DashboardFormGuard
{
    public const string PathPrefix = "/jobs";

    public static WebApplication UseDashboardFormGuard(this WebApplication app)
    {
        app.Use(async (context, next) =>
        {
            if (HttpMethods.IsPost(context.Request.Method)
                && context.Request.Path.StartsWithSegments(PathPrefix)
                && context.GetEndpoint() is not null
                && !context.Request.HasFormContentType)
            {
                await TypedResults.Problem(
                    detail: $"The job dashboard's POST endpoints take a form (application/x-www-form-urlencoded), not {context.Request.ContentType ?? "a body without a content type"}.",
                    statusCode: StatusCodes.Status415UnsupportedMediaType,
                    title: ProblemTypes.Title(ProblemTypes.UnsupportedMediaType),
                    type: ProblemTypes.Uri(ProblemTypes.UnsupportedMediaType),
                    instance: context.Request.Path).ExecuteAsync(context).ConfigureAwait(false);
                return;
            }

            await next(context).ConfigureAwait(false);
        });
        return app;
    }
}
