using System.CommandLine;
using System.CommandLine.Invocation;
using System.Reflection;

namespace Bitbudget.Service.Commands;

/// <summary><c>--version</c>: the informational version of this program's assembly (version and commit).</summary>
internal sealed class VersionAction : SynchronousCommandLineAction
{
    public override int Invoke(ParseResult parseResult)
    {
        var assembly = typeof(VersionAction).Assembly;
        var version = assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion ?? assembly.GetName().Version?.ToString() ?? "unknown";
        parseResult.InvocationConfiguration.Output.WriteLine(version);
        return ExitCodes.Done;
    }
}
