using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>One in-process run of the command line through <see cref="CommandLine.RunAsync"/> (what Program.cs calls): exit code and what it printed.</summary>
internal sealed record CommandRun(int ExitCode, string Out, string Error)
{
    private static readonly SemaphoreSlim ConsoleLock = new(1, 1);

    /// <summary>Lines written to standard error, progress-bar carriage returns and blank lines dropped.</summary>
    public IReadOnlyList<string> ErrorLines =>
        Error.Split('\n').Select(l => l.TrimEnd('\r')).Select(l => l[(l.LastIndexOf('\r') + 1)..]).Where(l => l.Trim().Length > 0).ToList();

    public IReadOnlyList<string> ErrorLinesStartingWithError => ErrorLines.Where(l => l.StartsWith("error:", StringComparison.Ordinal)).ToList();

    public static async Task<CommandRun> RunAsync(params string[] args)
    {
        Assert.False(CommandLine.StartsService(args), $"'{string.Join(' ', args)}' would start the service.");
        await ConsoleLock.WaitAsync();
        var (oldOut, oldError) = (Console.Out, Console.Error);
        using var output = new StringWriter();
        using var error = new StringWriter();
        try
        {
            Console.SetOut(output);
            Console.SetError(error);
            var exitCode = await CommandLine.RunAsync(args);
            return new CommandRun(exitCode, output.ToString(), error.ToString());
        }
        finally
        {
            Console.SetOut(oldOut);
            Console.SetError(oldError);
            ConsoleLock.Release();
        }
    }

    public override string ToString() => $"exit {ExitCode}\n--- stdout\n{Out}\n--- stderr\n{Error}";
}
