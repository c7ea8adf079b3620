namespace Bitbudget.Search.Evaluation;

/// <summary>The cut points a sweep shares (graph positions, ascending), what the planner expects them to cost, and their cache.</summary>
/// <param name="Cuts">Node positions where cached activations start a suffix; empty when every trial runs the whole graph.</param>
/// <param name="EstimatedMilliseconds">The cost model's estimate of the whole sweep's runs and builds.</param>
/// <param name="CacheBytes">Memory of the activations cached at the cuts, for the whole calibration set.</param>
internal sealed record CutPlan(IReadOnlyList<int> Cuts, double EstimatedMilliseconds, long CacheBytes)
{
    /// <summary>The cut a layer whose suffix could start at <paramref name="position"/> runs from: the nearest at or before it, 0 for none.</summary>
    public int CutFor(int position)
    {
        var chosen = 0;
        foreach (var cut in Cuts)
        {
            if (cut <= position)
            {
                chosen = cut;
            }
        }

        return chosen;
    }
}
