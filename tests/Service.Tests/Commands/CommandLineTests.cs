using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>Which arguments start the service, help and version for the program and every verb, and argument errors: all in-process.</summary>
[Collection(ConsoleCollection.Name)]
public sealed class CommandLineTests
{
    public static TheoryData<string> Verbs => ["inspect", "plan", "demo", "serve", "help"];

    [Fact]
    public void ServeIsStrippedBeforeTheHostSeesTheArguments()
    {
        Assert.Equal(["--urls=http://127.0.0.1:6000"], CommandLine.HostArguments(["serve", "--urls=http://127.0.0.1:6000"]));
        Assert.Equal(["--urls=x"], CommandLine.HostArguments(["--urls=x"]));
        Assert.Empty(CommandLine.HostArguments([]));
    }

    [Theory]
    [InlineData]
    [InlineData("serve")]
    [InlineData("serve", "--urls", "http://127.0.0.1:6000")]
    [InlineData("--urls", "http://127.0.0.1:6000")]
    [InlineData("--Bitbudget:Workers=2")]
    [InlineData("Bitbudget:Workers=2")]
    public void NoVerbServeOrOnlyHostSettingsStartTheService(params string[] args) => Assert.True(CommandLine.StartsService(args));

    [Theory]
    [InlineData("--help")]
    [InlineData("-h")]
    [InlineData("-?")]
    [InlineData("--version")]
    [InlineData("help")]
    [InlineData("serve", "--help")]
    [InlineData("--urls", "http://127.0.0.1:6000", "-h")]
    [InlineData("plan")]
    [InlineData("srve")]
    public void HelpVersionAndVerbsNeverStartTheService(params string[] args) => Assert.False(CommandLine.StartsService(args));

    [Theory]
    [InlineData("--help")]
    [InlineData("-h")]
    [InlineData("help")]
    public async Task TopLevelHelpListsEveryVerbWithExamplesAndExitCodes(string asked)
    {
        var run = await CommandRun.RunAsync(asked);

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Empty(run.Error);
        Assert.Contains("Usage:", run.Out, StringComparison.Ordinal);
        foreach (var verb in Verbs)
        {
            Assert.Matches($@"(?m)^  {verb}\b", run.Out);
        }

        AssertExamplesAndExitCodes(run.Out);
    }

    [Theory]
    [MemberData(nameof(Verbs))]
    public async Task EachVerbHasHelpWithUsageOptionsExamplesAndExitCodesByEveryRoute(string verb)
    {
        var byOption = await CommandRun.RunAsync(verb, "--help");
        var byShortOption = await CommandRun.RunAsync(verb, "-h");
        var byVerb = await CommandRun.RunAsync("help", verb);

        foreach (var run in new[] { byOption, byShortOption, byVerb })
        {
            Assert.True(run.ExitCode == 0, run.ToString());
            Assert.Empty(run.Error);
        }

        Assert.Equal(byOption.Out, byShortOption.Out);
        Assert.Equal(byOption.Out, byVerb.Out);
        Assert.Contains($"{CommandLine.ProgramName} {verb}", byOption.Out, StringComparison.Ordinal);
        Assert.Contains("Options:", byOption.Out, StringComparison.Ordinal);
        AssertExamplesAndExitCodes(byOption.Out);
    }

    [Fact]
    public async Task PlanHelpShowsEveryOptionWithItsDefaultAndChoices()
    {
        var run = await CommandRun.RunAsync("plan", "--help");

        foreach (var option in new PlanOptions().All)
        {
            Assert.Contains(option.Name, run.Out, StringComparison.Ordinal);
        }

        Assert.Matches(@"--method <knapsack\|greedy>.*\[default: knapsack\]", run.Out);
        Assert.Matches(@"--granularity <per-tensor\|per-channel>.*\[default: per-channel\]", run.Out);
        Assert.Matches(@"--clip <min-max\|percentile\|mse-optimal\|analytic-laplace\|analytic-gaussian>.*\[default: min-max\]", run.Out);
        Assert.Matches(@"--out <DIR>.*\[default: plan\]", run.Out);
        Assert.Matches(@"--model <M.onnx> \(REQUIRED\)", run.Out);
    }

    [Fact]
    public async Task VersionPrintsTheAssemblyVersionAndExits0()
    {
        var run = await CommandRun.RunAsync("--version");

        Assert.True(run.ExitCode == 0, run.ToString());
        var version = typeof(CommandLine).Assembly.GetCustomAttributes(typeof(System.Reflection.AssemblyInformationalVersionAttribute), false)
            .Cast<System.Reflection.AssemblyInformationalVersionAttribute>().Single().InformationalVersion;
        Assert.Equal(version, run.Out.Trim());
    }

    [Theory]
    [InlineData("srve", "'srve'")]
    [InlineData("help nope", "'nope' is not a verb")]
    [InlineData("plan", "Option '--model' is required")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr>=30 --bogus", "'--bogus'")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr>=30 --method fast", "--method takes one of: knapsack, greedy; got 'fast'")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr>=30 --pin conv1", "--pin takes LAYER=BITS")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr>=30 --bits 2,four", "'four' is not a number")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr>=30 --target-opset x", "'x' is not one")]
    [InlineData("plan --model m.onnx --data d.npz --budget sqnr", "Cannot read the budget")]
    [InlineData("inspect", "Required argument missing")]
    [InlineData("inspect a.onnx b.onnx", "'b.onnx'")]
    [InlineData("demo --out", "--out")]
    public async Task EveryArgumentErrorExits2WithErrorLinesAndWhereToLook(string line, string said)
    {
        var run = await CommandRun.RunAsync(line.Split(' '));

        Assert.True(run.ExitCode == 2, run.ToString());
        Assert.Empty(run.Out);
        Assert.Contains(run.ErrorLinesStartingWithError, l => l.Contains(said, StringComparison.Ordinal));
        Assert.Contains("--help' for the options and examples", run.Error, StringComparison.Ordinal);
        Assert.DoesNotContain("   at ", run.Error, StringComparison.Ordinal);
    }

    [Fact]
    public async Task HelpDocumentsTheExitCodesTheVerbsReturn()
    {
        var run = await CommandRun.RunAsync("--help");

        // The documented codes are the ones the verbs return.
        Assert.Contains($"  {ExitCodes.Done}  done", run.Out, StringComparison.Ordinal);
        Assert.Contains($"  {ExitCodes.BadFile}  an input file", run.Out, StringComparison.Ordinal);
        Assert.Contains($"  {ExitCodes.BadArguments}  bad arguments", run.Out, StringComparison.Ordinal);
        Assert.Contains($"  {ExitCodes.BudgetNotMet}  plan: the budget cannot be met", run.Out, StringComparison.Ordinal);
        Assert.Equal([0, 1, 2, 3], ExitCodes.All.Select(c => c.Code));
    }

    private static void AssertExamplesAndExitCodes(string help)
    {
        Assert.Contains("Examples:", help, StringComparison.Ordinal);
        Assert.Matches($@"(?m)^  {CommandLine.ProgramName} ", help);
        Assert.Contains("Exit codes:", help, StringComparison.Ordinal);
        foreach (var (code, _) in ExitCodes.All)
        {
            Assert.Matches($@"(?m)^  {code}  \S", help);
        }
    }
}
