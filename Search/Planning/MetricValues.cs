using System.Globalization;

namespace Bitbudget.Search.Planning;

/// <summary>Reads a budget metric out of measured metrics and writes it for people.</summary>
public static class MetricValues
{
    /// <summary>A value with its unit, e.g. "27.4 dB", "98.44%", "0.8 points".</summary>
    public static string Format(BudgetMetric metric, double value) => metric switch
    {
        BudgetMetric.Sqnr => double.IsPositiveInfinity(value) ? "lossless (infinite SQNR)" : value.ToString("0.0", CultureInfo.InvariantCulture) + " dB SQNR",
        BudgetMetric.RelativeMse => "relative MSE " + value.ToString("0.###e0", CultureInfo.InvariantCulture),
        BudgetMetric.Top1Agreement => (value * 100).ToString("0.00", CultureInfo.InvariantCulture) + "% top-1 agreement",
        BudgetMetric.KlDivergence => "KL " + value.ToString("0.###e0", CultureInfo.InvariantCulture) + " nats",
        BudgetMetric.CosineSimilarity => "cosine " + value.ToString("0.000000", CultureInfo.InvariantCulture),
        BudgetMetric.AccuracyDrop => value.ToString("0.00", CultureInfo.InvariantCulture) + " points accuracy drop",
        _ => value.ToString(CultureInfo.InvariantCulture),
    };

    /// <summary>The wire name of a metric ("sqnr", "relative-mse", "top1", "kl", "cosine", "accuracy-drop").</summary>
    public static string Name(BudgetMetric metric) => metric switch
    {
        BudgetMetric.Sqnr => "sqnr",
        BudgetMetric.RelativeMse => "relative-mse",
        BudgetMetric.Top1Agreement => "top1",
        BudgetMetric.KlDivergence => "kl",
        BudgetMetric.CosineSimilarity => "cosine",
        BudgetMetric.AccuracyDrop => "accuracy-drop",
        _ => throw new ArgumentOutOfRangeException(nameof(metric)),
    };

    /// <summary>Parses a wire name; null when unknown.</summary>
    public static BudgetMetric? Parse(string name) => name.Trim().ToLowerInvariant() switch
    {
        "sqnr" => BudgetMetric.Sqnr,
        "relative-mse" or "relmse" or "mse" => BudgetMetric.RelativeMse,
        "top1" or "top-1" => BudgetMetric.Top1Agreement,
        "kl" => BudgetMetric.KlDivergence,
        "cosine" => BudgetMetric.CosineSimilarity,
        "accuracy-drop" => BudgetMetric.AccuracyDrop,
        _ => null,
    };
}
