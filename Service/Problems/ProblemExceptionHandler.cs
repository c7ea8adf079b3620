using Bitbudget.Search;
using Bitbudget.Service.Store;
using Microsoft.AspNetCore.Diagnostics;
using Microsoft.AspNetCore.Mvc;

namespace Bitbudget.Service.Problems;

/// <summary>
/// Turns exceptions that escape a handler into problem responses: the engine's and the service's own
/// refusals keep their codes; a data folder that cannot be written is a 503 the client may retry; anything
/// else is a 500 that names the trace id and never the stack.
/// </summary>
internal sealed partial class ProblemExceptionHandler(IProblemDetailsService problems, StoreProbe probe, ILogger<ProblemExceptionHandler> logger) : IExceptionHandler
{
    public async ValueTask<bool> TryHandleAsync(HttpContext httpContext, Exception exception, CancellationToken cancellationToken)
    {
        if (exception is not BadHttpRequestException && StoreFault(exception) is { } fault)
        {
            LogStoreFault(logger, exception, httpContext.Request.Path);
            StoreUnavailableResponse.Prepare(httpContext);
            return await problems.TryWriteAsync(new ProblemDetailsContext
            {
                HttpContext = httpContext,
                ProblemDetails = StoreUnavailableResponse.Problem(fault),
                Exception = exception,
            }).ConfigureAwait(false);
        }

        var (status, code, detail, errors) = exception switch
        {
            ServiceException e => (e.Status, e.Code, e.Message, e.Errors),
            EngineException e => (StatusCodes.Status422UnprocessableEntity, e.Code, e.Message, null),
            BadHttpRequestException { StatusCode: StatusCodes.Status413PayloadTooLarge } =>
                (413, ProblemTypes.PayloadTooLarge, "The request body is larger than this endpoint accepts.", null),
            BadHttpRequestException e when BindingError.Describe(e) is { } binding =>
                (400, ProblemTypes.InvalidRequest, binding.Message, new Dictionary<string, string[]> { [binding.Field] = [binding.Message] }),
            BadHttpRequestException e => (e.StatusCode, ProblemTypes.ForStatus(e.StatusCode), "The request could not be read: " + e.Message, null),
            _ => (500, ProblemTypes.InternalError, $"The service hit an unexpected error; its log has the details under trace id {httpContext.TraceIdentifier}.", (IReadOnlyDictionary<string, string[]>?)null),
        };
        if (status >= 500)
        {
            LogUnexpected(logger, exception, httpContext.Request.Path);
        }

        httpContext.Response.StatusCode = status;
        var problem = new ProblemDetails { Status = status, Type = ProblemTypes.Uri(code), Title = ProblemTypes.Title(code), Detail = detail };
        if (errors is not null)
        {
            problem.Extensions["errors"] = errors;
        }

        return await problems.TryWriteAsync(new ProblemDetailsContext { HttpContext = httpContext, ProblemDetails = problem, Exception = exception })
            .ConfigureAwait(false);
    }

    /// <summary>What cannot be written, when the exception is a fault of the data folder (SQLite's disk codes, a disk errno, or an I/O error the probe confirms).</summary>
    private string? StoreFault(Exception exception)
    {
        if (StorageFault.Is(exception))
        {
            return probe.Probe() ?? exception.Message;
        }

        return exception is IOException && exception.GetType() != typeof(BadHttpRequestException) ? probe.Probe() : null;
    }

    [LoggerMessage(EventId = 1001, Level = LogLevel.Error, Message = "The data folder could not be written while serving {Path}")]
    private static partial void LogStoreFault(ILogger logger, Exception exception, string path);

    [LoggerMessage(EventId = 1000, Level = LogLevel.Error, Message = "Unexpected error while serving {Path}")]
    private static partial void LogUnexpected(ILogger logger, Exception exception, string path);
}
