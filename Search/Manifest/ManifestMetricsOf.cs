using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Manifest;

/// <summary>Measured metrics in the manifest's form (non-finite values as ManifestJson writes them).</summary>
public static class ManifestMetricsOf
{
    /// <summary>Pooled and per-output metrics; <paramref name="judged"/> says which outputs the budget judges (all when null).</summary>
    public static ManifestMetrics From(MetricSet metrics, Func<string, bool>? judged = null)
    {
        ArgumentNullException.ThrowIfNull(metrics);
        return new ManifestMetrics(
            metrics.RelativeMse,
            metrics.SqnrDb,
            metrics.Top1Agreement,
            metrics.KlDivergence,
            metrics.CosineSimilarity,
            metrics.Accuracy,
            metrics.PerOutput.Select(o => new ManifestOutputMetrics(
                o.Name,
                judged?.Invoke(o.Name) ?? true,
                o.RelativeMse,
                o.SqnrDb,
                o.Top1Agreement,
                o.KlDivergence,
                o.CosineSimilarity)).ToList());
    }
}
