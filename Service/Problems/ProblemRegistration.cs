using Microsoft.AspNetCore.Http.Features;

namespace Bitbudget.Service.Problems;

/// <summary>Registers RFC 9457 problem responses for every 4xx/5xx, including those the framework writes itself.</summary>
internal static class ProblemRegistration
{
    public static IServiceCollection AddBitbudgetProblems(this IServiceCollection services)
    {
        services.AddProblemDetails(options => options.CustomizeProblemDetails = context =>
        {
            var problem = context.ProblemDetails;
            var status = problem.Status ?? context.HttpContext.Response.StatusCode;
            if (problem.Type is null || !problem.Type.StartsWith(ProblemTypes.Base, StringComparison.Ordinal))
            {
                var code = ProblemTypes.ForStatus(status);
                problem.Type = ProblemTypes.Uri(code);
                problem.Title = ProblemTypes.Title(code);
                problem.Detail ??= DefaultDetail(status, context.HttpContext);
            }

            problem.Instance ??= context.HttpContext.Request.Path;
            problem.Extensions.Remove("exception");
        });
        services.AddExceptionHandler<ProblemExceptionHandler>();
        // Binding failures throw (instead of a bare 400) so the handler can say which parameter and what it takes.
        services.Configure<RouteHandlerOptions>(options => options.ThrowOnBadRequest = true);
        return services;
    }

    public static WebApplication UseBitbudgetProblems(this WebApplication app)
    {
        app.UseExceptionHandler();
        app.UseStatusCodePages();
        return app;
    }

    private static string DefaultDetail(int status, HttpContext context) => status switch
    {
        404 => $"Nothing is served at {context.Request.Path}; the API lives under /v1.",
        405 => $"{context.Request.Method} is not allowed on {context.Request.Path}.",
        415 => $"{context.Request.Path} does not take a {context.Request.ContentType ?? "body without a"} content type; send files as application/octet-stream and search requests as application/json.",
        504 => "The request took longer than the service allows; retry, or upload a smaller file.",
        _ => context.Features.Get<IHttpResponseFeature>()?.ReasonPhrase ?? "The request failed.",
    };
}
