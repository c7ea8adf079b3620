using Bitbudget.Search;
using Microsoft.AspNetCore.Http.HttpResults;

namespace Bitbudget.Service.Problems;

/// <summary>Builds the problem responses handlers return; every one carries a stable type from <see cref="ProblemTypes"/>.</summary>
internal static class ProblemResults
{
    public static ProblemHttpResult Of(int status, string code, string detail, IDictionary<string, object?>? extensions = null) =>
        TypedResults.Problem(detail: detail, statusCode: status, title: ProblemTypes.Title(code), type: ProblemTypes.Uri(code), extensions: extensions);

    public static ProblemHttpResult NotFound(string what, string id) =>
        Of(StatusCodes.Status404NotFound, ProblemTypes.NotFound, $"No {what} has the id '{id}'.");

    public static ProblemHttpResult FromEngine(EngineException exception) =>
        Of(StatusCodes.Status422UnprocessableEntity, exception.Code, exception.Message);

    public static ProblemHttpResult FromService(ServiceException exception) =>
        Of(exception.Status, exception.Code, exception.Message, exception.Errors is null ? null : new Dictionary<string, object?> { ["errors"] = exception.Errors });
}
