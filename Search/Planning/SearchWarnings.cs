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

    /// <summary>
    /// One warning naming the layers of <paramref name="chosen"/> that bias correction was asked for but could not move,
    /// with why (their biases stay as uploaded); none when every quantized layer was corrected.
    /// </summary>
    public static IEnumerable<string> UncorrectedBiases(IReadOnlyDictionary<string, string> uncorrected, IReadOnlyDictionary<string, LayerSetting>? chosen)
    {
        var missed = (chosen ?? new Dictionary<string, LayerSetting>())
            .Where(p => p.Value.BiasCorrection && BitWidths.IsInteger(p.Value.Bits) && uncorrected.ContainsKey(p.Key))
            .OrderBy(p => p.Key, StringComparer.Ordinal)
            .Select(p => $"'{p.Key}' ({uncorrected[p.Key]})")
            .ToList();
        if (missed.Count > 0)
        {
            yield return $"Bias correction left {missed.Count} quantized layer{(missed.Count == 1 ? string.Empty : "s")} with {(missed.Count == 1 ? "its" : "their")} own bias: {string.Join("; ", missed)}.";
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

    /// <summary>
    /// A warning when the budget is finer than the calibration set can resolve. Top-1 agreement moves in steps of
    /// one row of the judged output (one sample of a [samples, classes] output) and accuracy in steps of one
    /// labelled sample; when one step is more than the budget's slack (1 - bound for top-1, the allowed drop for
    /// accuracy), a single changed answer misses the budget, so only assignments that change no answer are kept,
    /// which tends to force the highest widths everywhere. Says how many samples would let one answer change.
    /// A budget that allows no change at all (top1&gt;=1, accuracy-drop&lt;=0) asks for exactly that and is not warned about.
    /// </summary>
    /// <param name="samples">Calibration samples.</param>
    /// <param name="labels">Labelled samples (accuracy is computed over them); null without labels.</param>
    public static string? Resolution(Budget budget, IReadOnlyList<OutputTensor> reference, OutputJudge judge, int samples, int? labels)
    {
        switch (budget)
        {
            case ErrorBudget { Metric: BudgetMetric.Top1Agreement, Limit: < 1 and > 0 } top1:
            {
                // The coarsest judged output decides: its rows are the fewest, so one of them weighs the most.
                var coarsest = reference.Where(o => judge.Judges(o.Name) && o.Data.Length > 0)
                    .Select(o => (o.Name, Rows: o.Data.Length / (o.Shape.Count == 0 ? 1 : Math.Max(1L, o.Shape[^1]))))
                    .OrderBy(o => o.Rows)
                    .FirstOrDefault();
                if (coarsest.Rows == 0)
                {
                    return null;
                }

                var slack = 1 - top1.Limit;
                var step = 1.0 / coarsest.Rows;
                if (!TooCoarse(step, slack))
                {
                    return null;
                }

                var rowsNeeded = StepsNeeded(1, slack);
                var samplesNeeded = (long)Math.Ceiling(rowsNeeded * (double)samples / coarsest.Rows);
                var unit = coarsest.Rows == samples ? $"one of its {samples} samples" : $"one of the {coarsest.Rows} answers of output '{coarsest.Name}' ({samples} samples)";
                return string.Create(
                    CultureInfo.InvariantCulture,
                    $"The budget top1>={top1.Limit} is finer than the calibration set can resolve: {unit} changes top-1 agreement by {step * 100:0.##}%, more than the {slack * 100:0.##}% the budget allows, so no answer may change and the search keeps only assignments that change none (often the highest widths). About {samplesNeeded} samples would let one answer in {rowsNeeded} change; calibrate on that many, or state the budget in another metric (sqnr, kl).");
            }

            case ErrorBudget { Metric: BudgetMetric.AccuracyDrop, Limit: > 0 } drop when labels is > 0 and var count:
            {
                // Accuracy drop is in percentage points: one labelled sample is 100 / count of them.
                var step = 100.0 / count;
                if (!TooCoarse(step, drop.Limit))
                {
                    return null;
                }

                var needed = StepsNeeded(100, drop.Limit);
                return string.Create(
                    CultureInfo.InvariantCulture,
                    $"The budget accuracy-drop<={drop.Limit} is finer than the calibration set can resolve: one of its {count} labelled samples changes accuracy by {step:0.##} points, more than the {drop.Limit} points the budget allows, so the search keeps only assignments that lose no net answer (often the highest widths). About {needed} labelled samples would let one answer change; calibrate on that many, or state the budget in another metric (sqnr, kl).");
            }

            default:
                return null;
        }
    }

    // A relative tolerance, so 1/100 against the slack 1 - 0.99 (0.010000000000000009 in binary) is not "too coarse".
    private static bool TooCoarse(double step, double slack) => step > slack * (1 + 1e-9);

    private static long StepsNeeded(double whole, double slack) => (long)Math.Ceiling((whole / slack) * (1 - 1e-9));

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
