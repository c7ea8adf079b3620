using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The additive error model the solvers sum over layers, per budget metric. Each metric is mapped to a
/// quantity that is (approximately) additive when several layers are quantized at once:
/// <list type="bullet">
/// <item>SQNR and relative MSE: relative noise power (noise power over signal power), 10^(-dB/10) for SQNR.
/// Noise from independently quantized layers is nearly uncorrelated at the output, so cross terms average
/// out and the powers add.</item>
/// <item>Top-1 agreement: the disagreement rate 1 - a. A row flips under the whole assignment only if some
/// layer flips it, so the sum is a union bound on the combined disagreement (pessimistic).</item>
/// <item>KL divergence: summed as is. For small perturbations KL is a quadratic form in the output
/// perturbation (the Fisher information), so independent perturbations add to second order.</item>
/// <item>Cosine similarity: 1 - cos, which is about theta^2 / 2; squared angles of independent, nearly
/// orthogonal perturbations add.</item>
/// <item>Accuracy drop: max(0, reference accuracy - trial accuracy) in percentage points, summed; a layer
/// that happens to raise accuracy earns no credit.</item>
/// </list>
/// None of these is exact, which is why every chosen assignment is measured as a whole afterwards.
/// </summary>
public static class AdditiveError
{
    /// <summary>What the additive model sums for <paramref name="metric"/>, in words (written into manifests and frontiers).</summary>
    public static string Describe(BudgetMetric metric) => metric switch
    {
        BudgetMetric.Sqnr => "relative noise power 10^(-SQNR/10), summed over layers",
        BudgetMetric.RelativeMse => "relative MSE, summed over layers",
        BudgetMetric.Top1Agreement => "disagreement rate 1 - agreement, summed over layers (a union bound)",
        BudgetMetric.KlDivergence => "KL divergence, summed over layers",
        BudgetMetric.CosineSimilarity => "1 - cosine similarity, summed over layers",
        BudgetMetric.AccuracyDrop => "accuracy drop in points (floored at 0), summed over layers",
        _ => throw UnknownMetric(metric),
    };

    /// <summary>True when the budget on <paramref name="metric"/> is a lower bound (SQNR, top-1 agreement, cosine).</summary>
    public static bool IsLowerBound(BudgetMetric metric) => metric switch
    {
        BudgetMetric.Sqnr or BudgetMetric.Top1Agreement or BudgetMetric.CosineSimilarity => true,
        BudgetMetric.RelativeMse or BudgetMetric.KlDivergence or BudgetMetric.AccuracyDrop => false,
        _ => throw UnknownMetric(metric),
    };

    /// <summary>
    /// The budget metric's value for a measured run, in the budget's units: dB for SQNR, percentage
    /// points for accuracy drop (needs labels, so both sets must carry an accuracy), else as measured.
    /// </summary>
    public static double MetricValue(BudgetMetric metric, MetricSet measured, MetricSet reference)
    {
        ArgumentNullException.ThrowIfNull(measured);
        ArgumentNullException.ThrowIfNull(reference);
        return metric switch
        {
            BudgetMetric.Sqnr => measured.SqnrDb,
            BudgetMetric.RelativeMse => measured.RelativeMse,
            BudgetMetric.Top1Agreement => measured.Top1Agreement,
            BudgetMetric.KlDivergence => measured.KlDivergence,
            BudgetMetric.CosineSimilarity => measured.CosineSimilarity,
            BudgetMetric.AccuracyDrop => AccuracyDropPoints(measured, reference),
            _ => throw UnknownMetric(metric),
        };
    }

    /// <summary>The additive contribution (>= 0) of one trial, measured against the FP32 reference run.</summary>
    public static double ToAdditive(BudgetMetric metric, MetricSet trial, MetricSet reference) =>
        ValueToAdditive(metric, MetricValue(metric, trial, reference));

    /// <summary>
    /// Maps a value of the budget metric (dB, fraction, nats or points) to the additive quantity;
    /// small numerical overshoots (cosine above 1, slightly negative KL) clamp to 0.
    /// </summary>
    public static double ValueToAdditive(BudgetMetric metric, double value)
    {
        if (double.IsNaN(value))
        {
            throw new EngineException("metric-not-a-number", $"The measured {metric} is not a number; the model outputs probably contain NaN or infinity.");
        }

        return metric switch
        {
            // +infinity dB (identical outputs) gives exactly zero noise power.
            BudgetMetric.Sqnr => Math.Pow(10.0, -value / 10.0),
            BudgetMetric.RelativeMse => Math.Max(0.0, value),
            BudgetMetric.Top1Agreement => Math.Max(0.0, 1.0 - value),
            BudgetMetric.KlDivergence => Math.Max(0.0, value),
            BudgetMetric.CosineSimilarity => Math.Max(0.0, 1.0 - value),
            BudgetMetric.AccuracyDrop => Math.Max(0.0, value),
            _ => throw UnknownMetric(metric),
        };
    }

    /// <summary>The additive quantity a budget limit allows: the solvers keep the summed error at or below it.</summary>
    public static double LimitToAdditive(BudgetMetric metric, double limit)
    {
        bool valid = metric switch
        {
            BudgetMetric.Sqnr => double.IsFinite(limit),
            BudgetMetric.Top1Agreement => limit is >= 0.0 and <= 1.0,
            BudgetMetric.CosineSimilarity => limit is >= -1.0 and <= 1.0,
            BudgetMetric.RelativeMse or BudgetMetric.KlDivergence or BudgetMetric.AccuracyDrop => limit >= 0.0 && !double.IsPositiveInfinity(limit),
            _ => throw UnknownMetric(metric),
        };
        if (!valid)
        {
            throw new EngineException("invalid-budget-limit", $"{limit} is not a valid {metric} budget ({LimitRange(metric)}).");
        }

        return ValueToAdditive(metric, limit);
    }

    /// <summary>The budget metric the additive model predicts for a summed error (the inverse of <see cref="ValueToAdditive"/>).</summary>
    public static double FromAdditive(BudgetMetric metric, double additiveSum)
    {
        if (double.IsNaN(additiveSum) || additiveSum < 0)
        {
            throw new ArgumentOutOfRangeException(nameof(additiveSum), additiveSum, "A summed additive error is a non-negative number.");
        }

        return metric switch
        {
            BudgetMetric.Sqnr => additiveSum == 0 ? double.PositiveInfinity : -10.0 * Math.Log10(additiveSum),
            BudgetMetric.RelativeMse => additiveSum,
            BudgetMetric.Top1Agreement => Math.Max(0.0, 1.0 - additiveSum),
            BudgetMetric.KlDivergence => additiveSum,
            BudgetMetric.CosineSimilarity => Math.Max(-1.0, 1.0 - additiveSum),
            BudgetMetric.AccuracyDrop => additiveSum,
            _ => throw UnknownMetric(metric),
        };
    }

    /// <summary>
    /// The predicted budget metric for a summed error. The reference run is accepted for symmetry with
    /// <see cref="ToAdditive"/>; every metric's prediction is relative to it already (accuracy drop in points).
    /// </summary>
    public static double FromAdditive(BudgetMetric metric, double additiveSum, MetricSet reference)
    {
        ArgumentNullException.ThrowIfNull(reference);
        return FromAdditive(metric, additiveSum);
    }

    /// <summary>True when a measured run satisfies the budget: value >= limit for lower bounds, value &lt;= limit otherwise.</summary>
    public static bool Meets(BudgetMetric metric, double limit, MetricSet measured, MetricSet reference)
    {
        double value = MetricValue(metric, measured, reference);
        if (double.IsNaN(value))
        {
            return false;
        }

        return IsLowerBound(metric) ? value >= limit : value <= limit;
    }

    private static double AccuracyDropPoints(MetricSet measured, MetricSet reference)
    {
        if (measured.Accuracy is not { } accuracy || reference.Accuracy is not { } referenceAccuracy)
        {
            throw new EngineException("accuracy-needs-labels", "An accuracy-drop budget needs a calibration set with labels; this one has none. Use an SQNR, agreement, KL or cosine budget instead.");
        }

        return 100.0 * (referenceAccuracy - accuracy);
    }

    private static string LimitRange(BudgetMetric metric) => metric switch
    {
        BudgetMetric.Sqnr => "a finite number of dB",
        BudgetMetric.Top1Agreement => "a fraction from 0 to 1",
        BudgetMetric.CosineSimilarity => "a value from -1 to 1",
        BudgetMetric.AccuracyDrop => "a non-negative number of percentage points",
        _ => "a finite non-negative number",
    };

    private static EngineException UnknownMetric(BudgetMetric metric) =>
        new("unknown-budget-metric", $"Budget metric {metric} is not known.");
}
