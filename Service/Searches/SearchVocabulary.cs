using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Searches;

/// <summary>The API's names for the engine's choices, and which side of an error budget each metric bounds.</summary>
internal static class SearchVocabulary
{
    /// <summary>Metric name, engine metric, and whether the budget is a lower bound (atLeast) on it.</summary>
    public static IReadOnlyDictionary<string, (BudgetMetric Metric, bool LowerBound)> Metrics { get; } =
        new Dictionary<string, (BudgetMetric, bool)>(StringComparer.Ordinal)
        {
            ["sqnr"] = (BudgetMetric.Sqnr, true),
            ["relative-mse"] = (BudgetMetric.RelativeMse, false),
            ["top1"] = (BudgetMetric.Top1Agreement, true),
            ["kl"] = (BudgetMetric.KlDivergence, false),
            ["cosine"] = (BudgetMetric.CosineSimilarity, true),
            ["accuracy-drop"] = (BudgetMetric.AccuracyDrop, false),
        };

    public static IReadOnlyDictionary<string, SearchMethod> Methods { get; } = new Dictionary<string, SearchMethod>(StringComparer.Ordinal)
    {
        ["knapsack"] = SearchMethod.Knapsack,
        ["greedy"] = SearchMethod.Greedy,
    };

    public static IReadOnlyDictionary<string, QuantizationScheme> Schemes { get; } = new Dictionary<string, QuantizationScheme>(StringComparer.Ordinal)
    {
        ["symmetric"] = QuantizationScheme.Symmetric,
        ["asymmetric"] = QuantizationScheme.Asymmetric,
    };

    public static IReadOnlyDictionary<string, Granularity> Granularities { get; } = new Dictionary<string, Granularity>(StringComparer.Ordinal)
    {
        ["per-channel"] = Granularity.PerChannel,
        ["per-tensor"] = Granularity.PerTensor,
    };

    public static IReadOnlyDictionary<string, StorageRule> Storages { get; } = new Dictionary<string, StorageRule>(StringComparer.Ordinal)
    {
        ["container"] = StorageRule.Container,
        ["packed"] = StorageRule.Packed,
    };

    public static IReadOnlyDictionary<string, RoundingMethod> Roundings { get; } = new Dictionary<string, RoundingMethod>(StringComparer.Ordinal)
    {
        ["nearest"] = RoundingMethod.Nearest,
        ["compensated"] = RoundingMethod.Compensated,
    };

    public static IReadOnlyDictionary<string, ClipMethod> Clips { get; } = new Dictionary<string, ClipMethod>(StringComparer.Ordinal)
    {
        ["min-max"] = ClipMethod.MinMax,
        ["percentile"] = ClipMethod.Percentile,
        ["mse-optimal"] = ClipMethod.MseOptimal,
        ["analytic-laplace"] = ClipMethod.AnalyticLaplace,
        ["analytic-gaussian"] = ClipMethod.AnalyticGaussian,
    };

    public static IReadOnlyDictionary<string, Search.Evaluation.MetricSpace> MetricSpaces { get; } = new Dictionary<string, Search.Evaluation.MetricSpace>(StringComparer.Ordinal)
    {
        ["linear"] = Search.Evaluation.MetricSpace.Linear,
        ["logit"] = Search.Evaluation.MetricSpace.Logit,
    };

    public static SearchStage? ParseStage(string? stage) =>
        Enum.TryParse<SearchStage>(stage, ignoreCase: true, out var parsed) ? parsed : null;

    public static string StageName(SearchStage stage) => stage.ToString().ToLowerInvariant();

    /// <summary>The engine's settings for a validated spec.</summary>
    public static SearchSettings ToSettings(SearchSpec spec)
    {
        var budget = spec.Budget;
        Budget engineBudget = budget.Bytes is not null || budget.AverageBits is not null
            ? new SizeBudget(budget.Bytes, budget.AverageBits, Metrics[budget.Metric ?? "sqnr"].Metric)
            : new ErrorBudget(Metrics[budget.Metric!].Metric, (budget.AtLeast ?? budget.AtMost)!.Value);
        return new SearchSettings(
            engineBudget,
            spec.Bits ?? [],
            Methods[spec.Method],
            Schemes[spec.Scheme],
            Granularities[spec.Granularity],
            Clips[spec.Clip],
            spec.Activations,
            spec.Pin,
            spec.Exclude,
            spec.TargetOpset,
            spec.Outputs,
            MetricSpaces[spec.MetricSpace],
            spec.SampleAxes,
            Storages[spec.Storage],
            spec.Rounding?.Select(r => Roundings[r]).ToList(),
            spec.Pairs ?? 0,
            spec.BiasCorrection);
    }
}
