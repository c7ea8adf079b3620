using System.CommandLine;
using System.CommandLine.Help;
using System.CommandLine.Invocation;

namespace Bitbudget.Service.Commands;

/// <summary>
/// The help of a verb: System.CommandLine's (description, usage, options with their defaults), then the
/// verb's examples and the exit codes, which the library has no section for.
/// </summary>
internal sealed class VerbHelp(HelpAction standard, IReadOnlyDictionary<Command, IReadOnlyList<string>> examples) : SynchronousCommandLineAction
{
    public override int Invoke(ParseResult parseResult)
    {
        standard.Invoke(parseResult);
        var output = parseResult.InvocationConfiguration.Output;
        var command = parseResult.CommandResult.Command;
        if (examples.TryGetValue(command, out var lines) && lines.Count > 0)
        {
            output.WriteLine("Examples:");
            foreach (var line in lines)
            {
                output.WriteLine("  " + line);
            }

            output.WriteLine();
        }

        output.WriteLine("Exit codes:");
        foreach (var (code, meaning) in ExitCodes.All)
        {
            output.WriteLine($"  {code}  {meaning}");
        }

        output.WriteLine();
        return ExitCodes.Done;
    }
}
