using System.CommandLine;
using System.CommandLine.Help;

namespace Bitbudget.Service.Commands;

/// <summary>
/// The command line, parsed with System.CommandLine: the verbs (inspect, plan, demo, help), help for each
/// (also <c>-h</c>), <c>--version</c>, and <c>serve</c>, which only documents the service's options: no verb,
/// or <c>serve</c>, starts the HTTP service (<see cref="StartsService"/>), which Program.cs runs.
/// Every argument error exits <see cref="ExitCodes.BadArguments"/> with one <c>error:</c> line each.
/// </summary>
internal static class CommandLine
{
    /// <summary>The verb that starts the HTTP service (also what no verb does).</summary>
    public const string Serve = "serve";

    /// <summary>The name help prints in usage lines (the binary is Bitbudget.Service; <c>dotnet run --project Service --</c> runs it).</summary>
    public const string ProgramName = "bitbudget";

    private static readonly HashSet<string> HelpTokens = new(StringComparer.Ordinal) { "--help", "-h", "-?" };

    private const string VersionToken = "--version";

    /// <summary>
    /// True when the arguments start the HTTP service: none, <c>serve ...</c>, or only host settings
    /// (<c>--urls X</c>, <c>--Bitbudget:Workers=2</c>, <c>Bitbudget:Workers=2</c>). Help and version never do.
    /// </summary>
    public static bool StartsService(string[] args) =>
        !args.Any(a => HelpTokens.Contains(a) || a == VersionToken)
        && (args.Length == 0 || args[0] == Serve || args[0].StartsWith('-') || args[0].Contains('=', StringComparison.Ordinal));

    /// <summary>The arguments the web host sees: everything after "serve", or everything when there is no verb.</summary>
    public static string[] HostArguments(string[] args) => args.Length > 0 && args[0] == Serve ? args[1..] : args;

    /// <summary>Parses and runs a verb (or help, or version); returns the exit code.</summary>
    public static async Task<int> RunAsync(string[] args)
    {
        var root = Build();
        var result = root.Parse(args);
        var configuration = new InvocationConfiguration { Output = Console.Out, Error = Console.Error, EnableDefaultExceptionHandler = false };
        if (result.Errors.Count > 0 && !AsksForHelpOrVersion(args))
        {
            foreach (var error in result.Errors)
            {
                await Console.Error.WriteLineAsync("error: " + error.Message);
            }

            var verb = result.CommandResult.Command == root ? string.Empty : " " + result.CommandResult.Command.Name;
            var verbs = verb.Length == 0 ? $" The verbs are: {string.Join(", ", root.Subcommands.Select(c => c.Name))}." : string.Empty;
            await Console.Error.WriteLineAsync($"Run '{ProgramName}{verb} --help' for the options and examples.{verbs}");
            return ExitCodes.BadArguments;
        }

        return await result.InvokeAsync(configuration);
    }

    // --version is the program's only before any verb (demo has a --version of its own, the model's).
    private static bool AsksForHelpOrVersion(string[] args) => args.Any(HelpTokens.Contains) || (args.Length > 0 && args[0] == VersionToken);

    /// <summary>The root command with every verb; help on each prints its examples and the exit codes.</summary>
    internal static Command Build()
    {
        var root = new Command(ProgramName, "Picks a bit width for every layer of an FP32 ONNX model under a budget. Without a verb (or with 'serve') it runs the HTTP service.")
        {
            TreatUnmatchedTokensAsErrors = true,
        };
        // Reached only with a word that is no verb (no arguments at all start the service): the parse error says which.
        root.SetAction(_ => ExitCodes.BadArguments);
        var help = new HelpOption();
        root.Options.Add(help);
        // The version of this program, not of the process's entry assembly (which System.CommandLine prints, and which
        // is the test host when the command line runs in-process).
        root.Options.Add(new VersionOption { Action = new VersionAction() });

        var examples = new Dictionary<Command, IReadOnlyList<string>>();
        void Add(Command verb, IReadOnlyList<string> verbExamples)
        {
            root.Subcommands.Add(verb);
            examples[verb] = verbExamples;
        }

        Add(InspectCommand.Create(), InspectCommand.Examples);
        Add(PlanCommand.Create(), PlanCommand.Examples);
        Add(DemoCommand.Create(), DemoCommand.Examples);
        Add(ServeCommand.Create(), ServeCommand.Examples);
        Add(HelpCommand.Create(), HelpCommand.Examples);
        examples[root] =
        [
            $"{ProgramName} demo --out demo",
            $"{ProgramName} inspect demo/hive-monitor.onnx",
            $"{ProgramName} plan --model demo/hive-monitor.onnx --data demo/calibration.npz --budget \"sqnr>=30\"",
            $"{ProgramName} serve --urls http://127.0.0.1:5080",
            $"{ProgramName} help plan",
            $"({ProgramName} stands for 'dotnet run --project Service --' in a checkout, or 'dotnet Bitbudget.Service.dll')",
        ];

        help.Action = new VerbHelp((HelpAction)help.Action!, examples);
        return root;
    }
}
