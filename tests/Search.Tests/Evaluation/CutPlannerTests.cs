using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// The cut planner against exhaustive search: on small random instances every subset of positions is priced with
/// the same cost model (builds, trials from the nearest cut, the whole graph before the first) and the planner's
/// choice must cost exactly the cheapest subset whose cache fits the memory allowed.
/// </summary>
public sealed class CutPlannerTests
{
    [Theory]
    [InlineData(1, 6, long.MaxValue)]
    [InlineData(2, 8, long.MaxValue)]
    [InlineData(3, 9, 3000)]
    [InlineData(4, 10, 1500)]
    [InlineData(5, 10, 500)]
    [InlineData(6, 7, 0)]
    public void TheChosenCutsCostTheLeastOfEverySubsetThatFits(int seed, int positions, long budget)
    {
        var random = new Random(seed);
        var layers = Enumerable.Range(0, positions)
            .Select(i => new CutPlanner.LayerDemand(10 * (i + 1), 1 + random.Next(7)))
            .Append(new CutPlanner.LayerDemand(0, 3))
            .ToList();
        var downstream = layers.ToDictionary(l => l.Position, l => l.Position == 0 ? 100.0 : 100.0 * (1 - (l.Position / (10.0 * (positions + 1)))) * (0.5 + random.NextDouble()));
        var build = layers.ToDictionary(l => l.Position, _ => 5 + (random.NextDouble() * 60));
        var memory = layers.ToDictionary(l => l.Position, _ => (long)random.Next(100, 1000));

        var plan = CutPlanner.Choose(layers, p => downstream[p], p => build[p], p => memory[p], budget);

        var cutPositions = layers.Where(l => l.Position > 0).Select(l => l.Position).ToList();
        var best = double.PositiveInfinity;
        for (var mask = 0; mask < 1 << cutPositions.Count; mask++)
        {
            var cuts = cutPositions.Where((_, i) => (mask & (1 << i)) != 0).ToList();
            if (cuts.Sum(c => memory[c]) <= budget)
            {
                best = Math.Min(best, Cost(layers, cuts, downstream, build));
            }
        }

        Assert.True(plan.CacheBytes <= budget, $"the plan caches {plan.CacheBytes} bytes against {budget} allowed");
        Assert.Equal(plan.Cuts.Sum(c => memory[c]), plan.CacheBytes);
        Assert.Equal(Cost(layers, plan.Cuts, downstream, build), plan.EstimatedMilliseconds, 6);

        // The memory is priced by bisection on a multiplier, which can miss a subset a knapsack would find; it must
        // be optimal without a binding budget and within a few percent with one.
        if (budget == long.MaxValue)
        {
            Assert.Equal(best, plan.EstimatedMilliseconds, 6);
        }
        else
        {
            Assert.InRange(plan.EstimatedMilliseconds, best - 1e-6, best * 1.10);
        }
    }

    [Fact]
    public void FreeBuildsCutAtEveryLayerAndDearBuildsNowhere()
    {
        var layers = Enumerable.Range(1, 5).Select(i => new CutPlanner.LayerDemand(i * 10, 6)).ToList();
        double Downstream(int p) => 100 - p;

        var free = CutPlanner.Choose(layers, Downstream, _ => 0, _ => 1, long.MaxValue);
        var dear = CutPlanner.Choose(layers, Downstream, _ => 1e9, _ => 1, long.MaxValue);

        Assert.Equal([10, 20, 30, 40, 50], free.Cuts);
        Assert.Empty(dear.Cuts);
        Assert.Equal(5 * 6 * 100.0, dear.EstimatedMilliseconds, 9);
        Assert.Equal(10, free.CutFor(15));
        Assert.Equal(0, free.CutFor(5));
    }

    private static double Cost(IReadOnlyList<CutPlanner.LayerDemand> layers, IReadOnlyList<int> cuts, Dictionary<int, double> downstream, Dictionary<int, double> build)
    {
        var plan = new CutPlan(cuts.Order().ToList(), 0, 0);
        return cuts.Sum(c => build[c]) + layers.Sum(l => l.Trials * downstream[plan.CutFor(Math.Max(0, l.Position))]);
    }
}
