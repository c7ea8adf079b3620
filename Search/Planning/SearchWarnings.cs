using System.Globalization;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>Sentences that tell the user a figure is weaker than it looks; written into the manifest and the summaries.</summary>
internal static class SearchWarnings
{
    /// <summary>How many of the strongest samples count as "a handful".</summary>
    public const int Handful = 5;

    /// <summary>
    /// One warning per judged output whose <see cref="Handful"/> strongest samples carry more than half of its
    /// signal power (with more than <see cref="Handful"/> samples in all): its SQNR then mostly says how
    /// those few samples came through. Half is a rule of thumb of our own.
    /// </summary>
    public static IEnumerable<string> FewSamples(IReadOnlyList<OutputTensor> reference, OutputJudge judge, MetricSpace space)
    {
        if (judge.Metric is not (BudgetMetric.Sqnr or BudgetMetric.RelativeMse))
        {
            yield break;
        }

        foreach (var output in reference.Where(o => judge.Judges(o.Name)))
        {
            if (OutputComparer.TopSampleShare(output, Handful, space) is { Samples: > Handful } top && top.Share > 0.5)
            {
                yield return string.Create(
                    CultureInfo.InvariantCulture,
                    $"Output '{output.Name}': {Handful} of {top.Samples} samples carry {top.Share * 100:0}% of its signal power, so its {MetricValues.Name(judge.Metric)} rests on few samples; add more samples of the kind that matter, or judge it in logit space if it is a probability.");
            }
        }
    }

    /// <summary>One warning per layer with candidate widths whose error came out infinite, which the search did not offer.</summary>
    public static IEnumerable<string> NonFiniteChoices(IReadOnlyList<(string Layer, int Bits)> choices) =>
        choices.GroupBy(c => c.Layer, StringComparer.Ordinal).Select(g =>
            $"Layer '{g.Key}' at {string.Join(", ", g.Select(c => BitWidths.Describe(c.Bits)))} gave an infinite error on the calibration set " +
            "(non-finite outputs, such as FP16 overflowing beyond +-65504, or a change to an output that is zero on every sample), so the search did not offer that width for it.");

    /// <summary>
    /// One warning per judged output that is zero on every calibration sample, under a budget that divides by its power:
    /// any change to it is an infinite error and no change a perfect one, so the figure says nothing.
    /// </summary>
    public static IEnumerable<string> SilentOutputs(IReadOnlyList<OutputTensor> reference, OutputJudge judge)
    {
        if (judge.Metric is not (BudgetMetric.Sqnr or BudgetMetric.RelativeMse))
        {
            yield break;
        }

        foreach (var output in reference.Where(o => judge.Judges(o.Name) && o.Data.Length > 0 && Array.TrueForAll(o.Data, v => v == 0)))
        {
            yield return $"Output '{output.Name}' is zero on every calibration sample: the model does not respond to this data, so its {MetricValues.Name(judge.Metric)} can only be perfect or infinitely bad. Calibrate with data the model responds to.";
        }
    }

    /// <summary>A warning when the held-out figure misses the error budget, with both figures side by side.</summary>
    public static string? HeldOutMisses(HeldOutCheck check, ErrorBudget budget, OutputJudge judge, double calibrationValue)
    {
        if (judge.Meets(budget.Limit, check.Measured, check.Reference))
        {
            return null;
        }

        var value = judge.Value(check.Measured, check.Reference);
        var output = judge.Binding(check.Measured) is { } binding ? $" (output '{binding.Name}')" : string.Empty;
        return $"Held-out check: the chosen assignment measures {MetricValues.Format(budget.Metric, value)}{output} on the {check.Samples} held-out samples, " +
            $"missing the budget of {MetricValues.Format(budget.Metric, budget.Limit)} it met on the calibration set ({MetricValues.Format(budget.Metric, calibrationValue)}); " +
            "the calibration set does not represent the held-out data well enough. Calibrate on more, and more varied, samples.";
    }
}
