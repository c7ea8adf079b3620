using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

public class GreedySolverTests
{
    // A: 8b 100 B / 0, 4b 50 B / 1, 2b 25 B / 10.  B: 8b 200 B / 0, 4b 100 B / 4, 2b 50 B / 5.
    private static readonly List<PlanningLayer> TwoLayers =
    [
        new("A", [new(8, 100, 0), new(4, 50, 1), new(2, 25, 10)]),
        new("B", [new(8, 200, 0), new(4, 100, 4), new(2, 50, 5)]),
    ];

    [Fact]
    public void ErrorBudgetTakesTheCheapestStepsPerByteUntilNoneFits()
    {
        // Hand-worked: A 8->4 costs 1/50 per byte, then B 8->2 costs 5/150 (less than B 8->4 at 4/100),
        // then A 4->2 would reach error 15 > 6 and nothing else is left.
        Selection selection = GreedySolver.MinimumBytes(TwoLayers, maxError: 6);

        Assert.Equal([1, 2], selection.ChoiceIndex);
        Assert.Equal(100, selection.Bytes);
        Assert.Equal(6.0, selection.Error);
    }

    [Fact]
    public void SizeBudgetStopsAsSoonAsTheBytesFitAndCanMissTheOptimum()
    {
        // Hand-worked: A 8->4 leaves 250 B, still over 200; B 8->2 leaves 100 B and stops there with
        // error 6, while the knapsack finds A 8b + B 4b = 200 B with error 4.
        Selection greedy = GreedySolver.MinimumError(TwoLayers, maxBytes: 200);
        Selection? exact = KnapsackSolver.MinimumError(TwoLayers, maxBytes: 200);

        Assert.Equal([1, 2], greedy.ChoiceIndex);
        Assert.Equal(6.0, greedy.Error);
        Assert.NotNull(exact);
        Assert.Equal([0, 1], exact.ChoiceIndex);
        Assert.Equal(4.0, exact.Error);
    }

    [Fact]
    public void ALowerWidthMeasuredWithLessErrorIsReachedDirectly()
    {
        List<PlanningLayer> layers =
        [
            new("A", [new(8, 100, 0), new(6, 75, 5), new(4, 50, 3)]),
            new("B", [new(8, 100, 0), new(4, 50, 4)]),
        ];

        Selection selection = GreedySolver.MinimumBytes(layers, maxError: 3);

        Assert.Equal([2, 0], selection.ChoiceIndex);
        Assert.Equal(150, selection.Bytes);
    }

    [Fact]
    public void StartsAtTheLeastErrorChoiceEvenWhenItIsNotTheWidest()
    {
        List<PlanningLayer> layers = [new("A", [new(8, 100, 2), new(6, 75, 1), new(4, 50, 3)])];

        Selection selection = GreedySolver.MinimumBytes(layers, maxError: 1);

        Assert.Equal([1], selection.ChoiceIndex);
        Assert.Equal(75, selection.Bytes);
    }

    [Fact]
    public void TiesGoToTheLowerLayerIndexThenTheHigherWidth()
    {
        List<PlanningLayer> layers =
        [
            new("first", [new(8, 100, 0), new(4, 50, 1), new(5, 50, 1)]),
            new("second", [new(8, 100, 0), new(4, 50, 1)]),
        ];

        Selection selection = GreedySolver.MinimumBytes(layers, maxError: 1);

        Assert.Equal([2, 0], selection.ChoiceIndex);
    }

    [Fact]
    public void AnUnreachableBudgetReturnsTheClosestAssignment()
    {
        Selection tooStrict = GreedySolver.MinimumBytes(TwoLayers, maxError: -1);
        Selection tooSmall = GreedySolver.MinimumError(TwoLayers, maxBytes: 10);

        Assert.Equal([0, 0], tooStrict.ChoiceIndex);
        Assert.Equal([2, 2], tooSmall.ChoiceIndex);
        Assert.Equal(75, tooSmall.Bytes);
    }

    // Reference: exhaustive enumeration; greedy must stay feasible whenever the budget is, and can
    // never beat the true optimum.
    [Theory]
    [MemberData(nameof(KnapsackSolverTests.SmallInstances), MemberType = typeof(KnapsackSolverTests))]
    public void GreedyIsFeasibleAndNeverBeatsBruteForce(int seed, int layerCount, int maxChoices)
    {
        List<PlanningLayer> layers = PlanningInstances.Rough(seed, layerCount, maxChoices);
        var all = PlanningInstances.Enumerate(layers);

        foreach (double maxError in all.Select(a => a.Error).Distinct())
        {
            Selection greedy = GreedySolver.MinimumBytes(layers, maxError);
            PlanningInstances.AssertConsistent(layers, greedy);
            Assert.True(greedy.Error <= maxError || greedy.Error == all.Min(a => a.Error));
            Assert.True(greedy.Bytes >= all.Where(a => a.Error <= maxError).Min(a => a.Bytes));
        }

        foreach (long maxBytes in all.Select(a => a.Bytes).Distinct())
        {
            Selection greedy = GreedySolver.MinimumError(layers, maxBytes);
            PlanningInstances.AssertConsistent(layers, greedy);
            Assert.True(greedy.Bytes <= maxBytes);
            Assert.True(greedy.Error >= all.Where(a => a.Bytes <= maxBytes).Min(a => a.Error));
        }
    }
}
