namespace Bitbudget.Service.Commands;

/// <summary>Dispatches the command-line verbs; each verb lives in its own file beside this one.</summary>
internal static class CommandLine
{
    /// <summary>The verb that starts the HTTP service (also what no verb does).</summary>
    public const string Serve = "serve";

    private static readonly Dictionary<string, Func<string[], Task<int>>> Verbs = new(StringComparer.Ordinal)
    {
        ["inspect"] = InspectCommand.RunAsync,
        ["demo"] = DemoCommand.RunAsync,
        ["plan"] = PlanCommand.RunAsync,
    };

    public static bool IsCommand(string[] args) => args.Length > 0 && Verbs.ContainsKey(args[0]);

    public static Task<int> RunAsync(string[] args) => Verbs[args[0]](args[1..]);

    /// <summary>A message naming the known verbs when the first argument is a word that is none of them; null otherwise.</summary>
    public static string? UnknownVerb(string[] args) =>
        args.Length > 0 && !args[0].StartsWith('-') && !args[0].Contains('=', StringComparison.Ordinal) && args[0] != Serve && !Verbs.ContainsKey(args[0])
            ? $"Unknown command '{args[0]}'; use one of: {string.Join(", ", Verbs.Keys.Prepend(Serve))}."
            : null;

    /// <summary>The arguments the web host sees: everything after "serve", or everything when there is no verb.</summary>
    public static string[] HostArguments(string[] args) => args.Length > 0 && args[0] == Serve ? args[1..] : args;
}
