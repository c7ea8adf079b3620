namespace Bitbudget.Service.Commands;

/// <summary>The exit codes of the command-line verbs, the same for every verb, and the text help prints about them.</summary>
internal static class ExitCodes
{
    public const int Done = 0;

    /// <summary>An input file is missing, unreadable or not what it should be, an output cannot be written, or a raise cannot be done.</summary>
    public const int BadFile = 1;

    /// <summary>An option is unknown, missing or malformed, or names something the model does not have.</summary>
    public const int BadArguments = 2;

    /// <summary>plan only: the search ran, and no assignment meets the budget (the artifacts say why).</summary>
    public const int BudgetNotMet = 3;

    public static readonly IReadOnlyList<(int Code, string Meaning)> All =
    [
        (Done, "done"),
        (BadFile, "an input file is missing, unreadable or of the wrong kind, an output cannot be written, or the opset raise cannot be done"),
        (BadArguments, "bad arguments: an unknown, missing or malformed option, or a layer, output or width the model does not take"),
        (BudgetNotMet, "plan: the budget cannot be met (the summary and the artifacts say by how much)"),
    ];
}
