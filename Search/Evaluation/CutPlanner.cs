namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Chooses the cut points a sweep shares. A layer's trials run the graph from the nearest chosen cut at or before
/// the layer (position 0: the whole graph, from the data), fed from activations cached at that cut. A cut costs one
/// session build and the memory of its cached activations, and saves, on every trial it serves, the work upstream of
/// it. The choice is exact for that cost model: a dynamic programme over the layers' positions in graph order, with
/// the cache memory priced by a multiplier found by bisection so the chosen cuts fit the memory allowed.
/// </summary>
internal static class CutPlanner
{
    /// <summary>One layer as the planner sees it: where its suffix could start and how many trials it has.</summary>
    public readonly record struct LayerDemand(int Position, int Trials);

    /// <param name="layers">Every swept layer; position 0 (or less) means it can only run the whole graph.</param>
    /// <param name="trialMilliseconds">Estimated time of one trial run from a position (0: the whole graph), in ms.</param>
    /// <param name="buildMilliseconds">Estimated time to build the suffix session from a position, in ms.</param>
    /// <param name="cacheBytes">Memory of the activations cached for a cut at a position, for the whole calibration set.</param>
    /// <param name="cacheBudgetBytes">Most memory all cuts' caches may take together.</param>
    public static CutPlan Choose(
        IReadOnlyList<LayerDemand> layers,
        Func<int, double> trialMilliseconds,
        Func<int, double> buildMilliseconds,
        Func<int, long> cacheBytes,
        long cacheBudgetBytes)
    {
        var groups = layers.Where(l => l.Position > 0).GroupBy(l => l.Position).OrderBy(g => g.Key)
            .Select(g => (Position: g.Key, Trials: (double)g.Sum(l => l.Trials))).ToList();
        var wholeTrials = layers.Where(l => l.Position <= 0).Sum(l => l.Trials);
        var positions = groups.Select(g => g.Position).ToArray();
        var weights = groups.Select(g => g.Trials).ToArray();
        var trial = positions.Select(trialMilliseconds).ToArray();
        var build = positions.Select(buildMilliseconds).ToArray();
        var memory = positions.Select(cacheBytes).ToArray();
        var whole = trialMilliseconds(0);

        CutPlan Solve(double pricePerByte) => Programme(positions, weights, trial, build, memory, whole, wholeTrials, pricePerByte);

        var free = Solve(0);
        if (free.CacheBytes <= cacheBudgetBytes)
        {
            return free;
        }

        // Price memory until the cuts fit: at `high` no cut can repay its cache, so the whole-graph plan (no cache) is feasible.
        double low = 0, high = 1;
        while (Solve(high).CacheBytes > cacheBudgetBytes && high < 1e30)
        {
            high *= 16;
        }

        var best = Solve(high);
        for (var i = 0; i < 60; i++)
        {
            var mid = 0.5 * (low + high);
            var plan = Solve(mid);
            if (plan.CacheBytes <= cacheBudgetBytes)
            {
                high = mid;
                if (plan.EstimatedMilliseconds < best.EstimatedMilliseconds)
                {
                    best = plan;
                }
            }
            else
            {
                low = mid;
            }
        }

        return best;
    }

    /// <summary>
    /// F[i] = cost of positions i.. when a cut sits at position i: its build (and priced memory), then its trials up to the
    /// next cut k, then F[k]. The answer runs positions before the first cut on the whole graph.
    /// </summary>
    private static CutPlan Programme(int[] positions, double[] weights, double[] trial, double[] build, long[] memory, double whole, double wholeTrials, double pricePerByte)
    {
        var m = positions.Length;
        var cost = new double[m + 1];
        var next = new int[m + 1];
        for (var i = m - 1; i >= 0; i--)
        {
            var own = build[i] + (pricePerByte * memory[i]);
            double served = 0, best = double.PositiveInfinity;
            for (var k = i + 1; k <= m; k++)
            {
                served += weights[k - 1] * trial[i];
                var candidate = served + cost[k];
                if (candidate < best)
                {
                    best = candidate;
                    next[i] = k;
                }
            }

            cost[i] = own + best;
        }

        // Before the first cut every trial runs the whole graph.
        double before = wholeTrials * whole, total = double.PositiveInfinity;
        var first = m;
        for (var k = 0; k <= m; k++)
        {
            var candidate = before + cost[k];
            if (candidate < total)
            {
                total = candidate;
                first = k;
            }

            if (k < m)
            {
                before += weights[k] * whole;
            }
        }

        var cuts = new List<int>();
        long bytes = 0;
        double estimated = 0;
        for (var k = 0; k < first; k++)
        {
            estimated += weights[k] * whole;
        }

        for (var i = first; i < m; i = next[i])
        {
            cuts.Add(positions[i]);
            bytes += memory[i];
            estimated += build[i];
            for (var l = i; l < next[i]; l++)
            {
                estimated += weights[l] * trial[i];
            }
        }

        return new CutPlan(cuts, estimated + (wholeTrials * whole), bytes);
    }
}
