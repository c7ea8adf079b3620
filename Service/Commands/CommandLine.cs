namespace Bitbudget.Service.Commands;

/// <summary>Dispatches the command-line verbs; each verb lives in its own file beside this one.</summary>
internal static class CommandLine
{
    private static readonly Dictionary<string, Func<string[], Task<int>>> Verbs = new(StringComparer.Ordinal)
    {
        ["inspect"] = InspectCommand.RunAsync,
        ["demo"] = DemoCommand.RunAsync,
        ["plan"] = PlanCommand.RunAsync,
    };

    public static bool IsCommand(string[] args) => args.Length > 0 && Verbs.ContainsKey(args[0]);

    public static Task<int> RunAsync(string[] args) => Verbs[args[0]](args[1..]);
}
