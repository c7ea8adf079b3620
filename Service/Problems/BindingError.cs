using System.Text.RegularExpressions;

namespace Bitbudget.Service.Problems;

/// <summary>
/// Rewrites the framework's parameter-binding failures (query, route and header values that do not parse)
/// into a sentence that names the parameter and what it takes, in place of a bare "The request failed."
/// </summary>
internal static partial class BindingError
{
    /// <returns>The field and its message, or null when the exception is not a binding failure.</returns>
    public static (string Field, string Message)? Describe(BadHttpRequestException exception)
    {
        ArgumentNullException.ThrowIfNull(exception);
        if (FailedToBind().Match(exception.Message) is { Success: true } failed)
        {
            var name = failed.Groups["name"].Value;
            var value = failed.Groups["value"].Value;
            return (name, $"Parameter '{name}' must be {Kind(failed.Groups["type"].Value)}; got '{value}'.");
        }

        if (Missing().Match(exception.Message) is { Success: true } missing)
        {
            var name = missing.Groups["name"].Value;
            return (name, $"Parameter '{name}' is required ({Kind(missing.Groups["type"].Value)}).");
        }

        return null;
    }

    private static string Kind(string type) => type.Replace("Nullable<", "", StringComparison.Ordinal).TrimEnd('>', '?') switch
    {
        "int" or "long" or "short" or "Int32" or "Int64" => "a whole number",
        "double" or "float" or "decimal" or "Double" => "a number",
        "bool" or "Boolean" => "true or false",
        "Guid" => "a GUID",
        "DateTimeOffset" or "DateTime" => "a date and time (ISO 8601)",
        "string" or "String" => "a string",
        _ => "a valid value",
    };

    // RequestDelegateFactory's messages (Microsoft.AspNetCore.Http): 'Failed to bind parameter "int? limit" from "abc".'
    [GeneratedRegex("^Failed to bind parameter \"(?<type>\\S+) (?<name>[^\"\\s]+)\" from \"(?<value>.*)\"\\.$", RegexOptions.Singleline)]
    private static partial Regex FailedToBind();

    [GeneratedRegex("^Required parameter \"(?<type>\\S+) (?<name>[^\"\\s]+)\" was not provided", RegexOptions.Singleline)]
    private static partial Regex Missing();
}
