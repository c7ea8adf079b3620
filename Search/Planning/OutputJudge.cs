using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Decides a budget on the outputs that matter: a budget holds when every judged output meets it, so
/// the value that decides is the worst judged output's (lowest SQNR, agreement or cosine; highest
/// relative MSE or KL). Accuracy drop is a property of the model's answer (its first output), not of
/// each output, and is judged as measured.
/// </summary>
/// <remarks>
/// The additive model. A layer's additive error is the worst judged output's additive error for that
/// layer. Summed over layers this bounds every judged output's own sum from above (a sum of maxima is at
/// least the maximum of sums), so a selection that fits the additive budget fits it on each judged output.
/// The bound can be loose when different layers hurt different outputs; the validation loop measures the
/// choice and loosens the target when the measurement has room.
/// </remarks>
public sealed class OutputJudge
{
    private readonly HashSet<string>? _judged;

    /// <param name="metric">The budget's metric.</param>
    /// <param name="judged">Names of the outputs the budget judges; null or empty for every output.</param>
    public OutputJudge(BudgetMetric metric, IReadOnlyCollection<string>? judged)
    {
        Metric = metric;
        _judged = judged is { Count: > 0 } ? judged.ToHashSet(StringComparer.Ordinal) : null;
    }

    public BudgetMetric Metric { get; }

    /// <summary>True when <paramref name="output"/> counts towards the budget.</summary>
    public bool Judges(string output) => _judged is null || _judged.Contains(output);

    /// <summary>
    /// The budget metric that decides: the worst judged output's value (falls back to the pooled value for
    /// records without per-output metrics, and for accuracy drop).
    /// </summary>
    public double Value(MetricSet measured, MetricSet reference) =>
        Binding(measured) is { } worst ? OutputValue(worst) : AdditiveError.MetricValue(Metric, measured, reference);

    /// <summary>The judged output whose value decides (the worst one); null when there is none to pick.</summary>
    public OutputMetrics? Binding(MetricSet measured)
    {
        ArgumentNullException.ThrowIfNull(measured);
        if (Metric == BudgetMetric.AccuracyDrop)
        {
            return null;
        }

        OutputMetrics? worst = null;
        foreach (var output in measured.PerOutput.Where(o => Judges(o.Name)))
        {
            var value = OutputValue(output);
            if (worst is null || double.IsNaN(value) || IsWorse(value, OutputValue(worst)))
            {
                worst = output;
                if (double.IsNaN(value))
                {
                    break;
                }
            }
        }

        return worst;
    }

    /// <summary>The additive contribution of one trial: that of its worst judged output.</summary>
    public double ToAdditive(MetricSet trial, MetricSet reference) => AdditiveError.ValueToAdditive(Metric, Value(trial, reference));

    /// <summary>True when every judged output meets the limit.</summary>
    public bool Meets(double limit, MetricSet measured, MetricSet reference)
    {
        var value = Value(measured, reference);
        return !double.IsNaN(value) && (AdditiveError.IsLowerBound(Metric) ? value >= limit : value <= limit);
    }

    /// <summary>One output's value of the budget metric.</summary>
    public double OutputValue(OutputMetrics output) => Metric switch
    {
        BudgetMetric.Sqnr => output.SqnrDb,
        BudgetMetric.RelativeMse => output.RelativeMse,
        BudgetMetric.Top1Agreement => output.Top1Agreement,
        BudgetMetric.KlDivergence => output.KlDivergence,
        BudgetMetric.CosineSimilarity => output.CosineSimilarity,
        _ => throw new InvalidOperationException($"{Metric} has no per-output value."),
    };

    private bool IsWorse(double value, double than) => AdditiveError.IsLowerBound(Metric) ? value < than : value > than;
}
