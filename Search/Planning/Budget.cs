namespace Bitbudget.Search.Planning;

/// <summary>What a search must respect: an error bound (objective: fewest bytes) or a size bound (objective: least error).</summary>
public abstract record Budget;

/// <summary>An error budget: the measured metric must stay on the right side of <paramref name="Limit"/>.</summary>
/// <param name="Metric">The metric; whether the limit is a lower or upper bound follows from it.</param>
/// <param name="Limit">dB for SQNR, a fraction for agreement and cosine, points for accuracy drop.</param>
public sealed record ErrorBudget(BudgetMetric Metric, double Limit) : Budget;

/// <summary>A size budget: at most <paramref name="Bytes"/> weight bytes, or at most <paramref name="AverageBits"/> bits per weight; exactly one is set.</summary>
/// <param name="Metric">The error the search minimises under the size bound.</param>
public sealed record SizeBudget(long? Bytes, double? AverageBits, BudgetMetric Metric = BudgetMetric.Sqnr) : Budget;
