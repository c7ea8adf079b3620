using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

public sealed class SearchWarningsTests
{
    [Fact]
    public void AnOutputWhosePowerSitsInAFewSamplesIsWarnedAboutAndAnEvenOneIsNot()
    {
        // 40 samples: in "spiky" three samples hold values of 20, the rest 1 (3 x 400 of 1237 power: 97%); "even" is flat.
        var spiky = Enumerable.Range(0, 40).Select(i => i is 3 or 17 or 30 ? 20f : 1f).ToArray();
        var even = Enumerable.Repeat(1f, 40).ToArray();
        var outputs = new[] { new OutputTensor("spiky", spiky, [40, 1]), new OutputTensor("even", even, [40, 1]) };

        var warnings = SearchWarnings.FewSamples(outputs, new OutputJudge(BudgetMetric.Sqnr, null), MetricSpace.Linear).ToList();

        var warning = Assert.Single(warnings);
        Assert.StartsWith("Output 'spiky': 5 of 40 samples carry 97% of its signal power", warning);
        Assert.Empty(SearchWarnings.FewSamples(outputs, new OutputJudge(BudgetMetric.Sqnr, ["even"]), MetricSpace.Linear));
        Assert.Empty(SearchWarnings.FewSamples(outputs, new OutputJudge(BudgetMetric.Top1Agreement, null), MetricSpace.Linear));
    }

    [Theory]
    // Top-1 agreement moves in steps of 1/rows: 64 rows step 1.5625%, more than the 1% that top1>=0.99 allows;
    // 100 rows step exactly 1% (99/100 meets 0.99), so 100 is the count the warning names and 100 are not warned about.
    [InlineData(64, 0.99, 100L)]
    [InlineData(99, 0.99, 100L)]
    [InlineData(100, 0.99, null)]
    [InlineData(256, 0.99, null)]
    [InlineData(256, 0.999, 1000L)]
    [InlineData(20, 0.97, 34L)] // 1 / 0.03 = 33.3: 34 rows allow one change (33/34 = 0.9706)
    [InlineData(64, 1.0, null)] // asks for no change at all, which is what it gets
    public void ATop1BudgetFinerThanOneSampleIsWarnedAboutWithTheSamplesNeeded(int rows, double bound, long? needed)
    {
        var outputs = new[] { new OutputTensor("probability", new float[rows * 4], [rows, 4]) };

        var warning = SearchWarnings.Resolution(new ErrorBudget(BudgetMetric.Top1Agreement, bound), outputs, new OutputJudge(BudgetMetric.Top1Agreement, null), rows, labels: null);

        if (needed is null)
        {
            Assert.Null(warning);
            return;
        }

        Assert.NotNull(warning);
        Assert.StartsWith($"The budget top1>={bound.ToString(System.Globalization.CultureInfo.InvariantCulture)} is finer than the calibration set can resolve: one of its {rows} samples", warning, StringComparison.Ordinal);
        Assert.Contains($"About {needed} samples would let one answer in {needed} change", warning, StringComparison.Ordinal);
    }

    [Fact]
    public void ATop1BudgetOnASequenceOutputCountsItsAnswersNotItsSamples()
    {
        // 8 samples of 16 time steps: 128 answers, each 0.78% of the agreement, under the 1% of top1>=0.99. Judged
        // alone, a [8, 4] output would need 100 samples; the judge decides which output counts.
        var outputs = new[] { new OutputTensor("steps", new float[8 * 16 * 4], [8, 16, 4]), new OutputTensor("label", new float[8 * 4], [8, 4]) };
        var budget = new ErrorBudget(BudgetMetric.Top1Agreement, 0.99);

        Assert.Null(SearchWarnings.Resolution(budget, outputs, new OutputJudge(BudgetMetric.Top1Agreement, ["steps"]), 8, labels: null));
        var warning = SearchWarnings.Resolution(budget, outputs, new OutputJudge(BudgetMetric.Top1Agreement, null), 8, labels: null);
        Assert.NotNull(warning);
        Assert.Contains("About 100 samples", warning, StringComparison.Ordinal);

        // Only the sequence output judged, at a finer bound: 1000 answers are needed, 1000 / 16 per sample = 62.5, so 63 samples.
        var fine = SearchWarnings.Resolution(new ErrorBudget(BudgetMetric.Top1Agreement, 0.999), outputs, new OutputJudge(BudgetMetric.Top1Agreement, ["steps"]), 8, labels: null);
        Assert.NotNull(fine);
        Assert.Contains("one of the 128 answers of output 'steps' (8 samples)", fine, StringComparison.Ordinal);
        Assert.Contains("About 63 samples would let one answer in 1000 change", fine, StringComparison.Ordinal);
    }

    [Theory]
    // One labelled sample of 64 is 1.5625 accuracy points, more than 0.5 allows; 200 make one sample 0.5 points.
    [InlineData(64, 0.5, 200L)]
    [InlineData(200, 0.5, null)]
    [InlineData(64, 2.0, null)]
    [InlineData(64, 0.0, null)] // no drop at all is asked for explicitly
    public void AnAccuracyDropBudgetFinerThanOneLabelledSampleIsWarnedAbout(int labels, double points, long? needed)
    {
        var outputs = new[] { new OutputTensor("logits", new float[labels * 4], [labels, 4]) };

        var warning = SearchWarnings.Resolution(new ErrorBudget(BudgetMetric.AccuracyDrop, points), outputs, new OutputJudge(BudgetMetric.AccuracyDrop, null), labels, labels);

        if (needed is null)
        {
            Assert.Null(warning);
            return;
        }

        Assert.NotNull(warning);
        Assert.Contains($"one of its {labels} labelled samples changes accuracy by 1.56 points", warning, StringComparison.Ordinal);
        Assert.Contains($"About {needed} labelled samples", warning, StringComparison.Ordinal);
    }

    [Fact]
    public void ContinuousMetricsAndSizeBudgetsHaveNoResolutionWarning()
    {
        var outputs = new[] { new OutputTensor("logits", new float[8 * 4], [8, 4]) };
        var judge = new OutputJudge(BudgetMetric.Sqnr, null);

        Assert.Null(SearchWarnings.Resolution(new ErrorBudget(BudgetMetric.Sqnr, 60), outputs, judge, 8, 8));
        Assert.Null(SearchWarnings.Resolution(new ErrorBudget(BudgetMetric.KlDivergence, 1e-9), outputs, judge, 8, 8));
        Assert.Null(SearchWarnings.Resolution(new SizeBudget(1000, null, BudgetMetric.Top1Agreement), outputs, judge, 8, 8));
    }
}
