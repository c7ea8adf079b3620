using System.CommandLine;

namespace Bitbudget.Service.Commands;

/// <summary><c>help [VERB]</c>: the same text as <c>--help</c>, for the program or for one verb.</summary>
internal static class HelpCommand
{
    public static readonly IReadOnlyList<string> Examples = [$"{CommandLine.ProgramName} help", $"{CommandLine.ProgramName} help plan"];

    public static Command Create()
    {
        var verb = new Argument<string?>("VERB") { Arity = ArgumentArity.ZeroOrOne, Description = "The verb to explain; none explains the program." };
        var help = new Command("help", "Prints help for the program or for one verb.") { verb };
        help.SetAction(async (result, _) =>
        {
            var name = result.GetValue(verb);
            string[] asked = name is null ? ["--help"] : [name, "--help"];
            var verbs = CommandLine.Build().Subcommands.Select(c => c.Name).ToList();
            if (name is not null && !verbs.Contains(name, StringComparer.Ordinal))
            {
                await Console.Error.WriteLineAsync($"error: '{name}' is not a verb; the verbs are: {string.Join(", ", verbs)}.");
                await Console.Error.WriteLineAsync($"Run '{CommandLine.ProgramName} --help' for the options and examples.");
                return ExitCodes.BadArguments;
            }

            return await CommandLine.RunAsync(asked);
        });
        return help;
    }
}
