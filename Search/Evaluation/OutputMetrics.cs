namespace Bitbudget.Search.Evaluation;

/// <summary>The metrics of one model output (see <see cref="MetricSet"/> for what each means).</summary>
/// <param name="Name">The output's name in the model.</param>
public sealed record OutputMetrics(
    string Name,
    double RelativeMse,
    double SqnrDb,
    double Top1Agreement,
    double KlDivergence,
    double CosineSimilarity);
