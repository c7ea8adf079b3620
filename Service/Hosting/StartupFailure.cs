using System.Text.RegularExpressions;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// Turns what stops the host from starting because of its configuration into one line per cause, for
/// standard error and a non-zero exit, in place of an unhandled exception (a stack trace and a core dump).
/// </summary>
internal static partial class StartupFailure
{
    /// <summary>The exit code for a configuration error (EX_CONFIG in BSD sysexits.h).</summary>
    public const int ExitCode = 78;

    /// <returns>The lines to print, or null when the exception is not a configuration problem.</returns>
    public static IReadOnlyList<string>? Describe(Exception exception) => exception switch
    {
        StartupRefusedException refused => [refused.Message],
        // Kestrel: IOException "Failed to bind to address http://127.0.0.1:5080: address already in use." around AddressInUseException.
        IOException { InnerException: Microsoft.AspNetCore.Connections.AddressInUseException } busy =>
            [$"{busy.Message.TrimEnd('.')}; another program (perhaps another Bitbudget) listens there: stop it, or give this one another address with --urls http://127.0.0.1:PORT."],
        OptionsValidationException invalid => invalid.Failures.ToList(),
        InvalidOperationException conversion when ConversionFailed().Match(conversion.Message) is { Success: true } match =>
            [$"Setting {match.Groups["key"].Value} must be {Kind(match.Groups["type"].Value)}; got '{match.Groups["value"].Value}'."],
        AggregateException aggregate when aggregate.InnerExceptions.Select(Describe).ToList() is var all && all.All(d => d is not null) =>
            all.SelectMany(d => d!).ToList(),
        { InnerException: { } inner } => Describe(inner),
        _ => null,
    };

    private static string Kind(string type) => type switch
    {
        "System.Int32" or "System.Int64" => "a whole number",
        "System.Boolean" => "true or false",
        "System.Double" => "a number",
        _ => "of the expected type",
    };

    // Microsoft.Extensions.Configuration.Binder: "Failed to convert configuration value 'abc' at 'Bitbudget:Workers' to type 'System.Int32'."
    [GeneratedRegex("Failed to convert configuration value (?:'(?<value>[^']*)' )?at '(?<key>[^']+)' to type '(?<type>[^']+)'")]
    private static partial Regex ConversionFailed();
}
