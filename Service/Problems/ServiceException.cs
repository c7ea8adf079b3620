namespace Bitbudget.Service.Problems;

/// <summary>
/// A request the service refuses for a reason of its own (not the engine's): carries the HTTP status, the
/// stable problem code and, for invalid requests, the message per field.
/// </summary>
internal sealed class ServiceException(int status, string code, string message, IReadOnlyDictionary<string, string[]>? errors = null)
    : Exception(message)
{
    public int Status { get; } = status;

    public string Code { get; } = code;

    public IReadOnlyDictionary<string, string[]>? Errors { get; } = errors;

    public static ServiceException Invalid(string field, string message) =>
        new(StatusCodes.Status400BadRequest, ProblemTypes.InvalidRequest, message, new Dictionary<string, string[]> { [field] = [message] });
}
