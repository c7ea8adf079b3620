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
}
