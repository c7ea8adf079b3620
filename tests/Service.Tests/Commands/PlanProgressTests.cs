using Bitbudget.Search.Planning;
using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Commands;

public sealed class PlanProgressTests
{
    private static readonly SearchProgress[] Reports =
    [
        new(SearchStage.Reference, 0, 1), new(SearchStage.Reference, 1, 1),
        new(SearchStage.Sweep, 0, 12), new(SearchStage.Sweep, 5, 12), new(SearchStage.Sweep, 12, 12),
        // Validation that meets the budget in its third round stops before its seventh.
        new(SearchStage.Validate, 0, 7), new(SearchStage.Validate, 3, 7),
        new(SearchStage.Export, 0, 1), new(SearchStage.Export, 1, 1),
    ];

    [Fact]
    public void OnATerminalEachStageIsOneBarRedrawnInPlaceAndEndedByANewline()
    {
        var text = Run(PlanProgress.Mode.Terminal);

        var lines = text.Split('\n');
        Assert.Equal(4, lines.Length - 1);
        Assert.Equal(string.Empty, lines[^1]);

        // What a terminal shows of each line is what follows its last carriage return.
        var shown = lines[..^1].Select(l => l[(l.LastIndexOf('\r') + 1)..].TrimEnd()).ToList();
        Assert.Equal(
            [
                "reference [##############################] 1/1",
                "sweep     [##############################] 12/12",
                "validate  [############..................] 3/7",
                "export    [##############################] 1/1",
            ],
            shown.Where(l => l.Length > 0));
    }

    [Fact]
    public void AShorterBarIsPaddedOverTheLongerOneSoNoDigitStaysBehind()
    {
        var error = new StringWriter();
        var progress = new PlanProgress(error, PlanProgress.Mode.Terminal);
        progress.Report(new SearchProgress(SearchStage.Sweep, 10, 100));
        progress.Report(new SearchProgress(SearchStage.Sweep, 9, 10));

        var draws = error.ToString().Split('\r', StringSplitOptions.RemoveEmptyEntries);
        Assert.Equal(draws[0].Length, draws[1].Length);
        Assert.EndsWith("9/10  ", draws[1], StringComparison.Ordinal);
    }

    [Fact]
    public void WithoutATerminalEveryStageIsAStartLineAndADoneLineWithoutCarriageReturns()
    {
        var text = Run(PlanProgress.Mode.Lines);

        Assert.DoesNotContain('\r', text);
        Assert.Equal(
            [
                "reference: started (1 steps)", "reference: done (1/1)",
                "sweep: started (12 steps)", "sweep: done (12/12)",
                "validate: started (7 steps)", "validate: done (3/7)",
                "export: started (1 steps)", "export: done (1/1)",
            ],
            text.Split('\n', StringSplitOptions.RemoveEmptyEntries));
    }

    [Fact]
    public void QuietPrintsNothing() => Assert.Empty(Run(PlanProgress.Mode.Quiet));

    private static string Run(PlanProgress.Mode mode)
    {
        var error = new StringWriter();
        var progress = new PlanProgress(error, mode);
        foreach (var report in Reports)
        {
            progress.Report(report);
        }

        progress.Finish();
        return error.ToString();
    }
}
