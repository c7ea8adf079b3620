using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

public class KnapsackSolverTests
{
    public static TheoryData<int, int, int> SmallInstances()
    {
        var data = new TheoryData<int, int, int>();
        for (int seed = 1; seed <= 40; seed++)
        {
            data.Add(seed, 3 + (seed % 2), 2 + (seed % 5));
        }

        return data;
    }

    // Reference: exhaustive enumeration of every assignment (at most 6^4 of them).
    [Theory]
    [MemberData(nameof(SmallInstances))]
    public void FrontierIsExactlyTheBruteForceParetoSet(int seed, int layerCount, int maxChoices)
    {
        List<PlanningLayer> layers = PlanningInstances.Rough(seed, layerCount, maxChoices);
        List<(long Bytes, double Error)> expected = PlanningInstances.ParetoSet(PlanningInstances.Enumerate(layers));

        FrontierResult frontier = KnapsackSolver.Frontier(layers);

        Assert.True(frontier.Exact);
        Assert.Equal(1.0, frontier.BytesFactorBound);
        Assert.Equal(expected, frontier.Bytes.Zip(frontier.Errors).ToList());
        for (int i = 0; i < frontier.Count; i++)
        {
            Selection point = frontier[i];
            PlanningInstances.AssertConsistent(layers, point);
            Assert.False(point.Thinned);
            if (i > 0)
            {
                Assert.True(frontier.Bytes[i] > frontier.Bytes[i - 1], "bytes must rise strictly along the frontier");
                Assert.True(frontier.Errors[i] < frontier.Errors[i - 1], "a point with more bytes and no less error is dominated");
            }
        }
    }

    // Reference: exhaustive enumeration, at every distinct budget the instance has plus one between.
    [Theory]
    [MemberData(nameof(SmallInstances))]
    public void BudgetedOptimaMatchBruteForceAtEveryBudget(int seed, int layerCount, int maxChoices)
    {
        List<PlanningLayer> layers = PlanningInstances.Rough(seed, layerCount, maxChoices);
        var all = PlanningInstances.Enumerate(layers);

        foreach (double maxError in all.Select(a => a.Error).Distinct().Append(-1.0).Append(all.Min(a => a.Error) - 0.5))
        {
            var feasible = all.Where(a => a.Error <= maxError).ToList();
            Selection? found = KnapsackSolver.MinimumBytes(layers, maxError);
            if (feasible.Count == 0)
            {
                Assert.Null(found);
                continue;
            }

            Assert.NotNull(found);
            PlanningInstances.AssertConsistent(layers, found);
            Assert.Equal(feasible.Min(a => a.Bytes), found.Bytes);
            Assert.True(found.Error <= maxError);
        }

        foreach (long maxBytes in all.Select(a => a.Bytes).Distinct().Append(-1L))
        {
            var feasible = all.Where(a => a.Bytes <= maxBytes).ToList();
            Selection? found = KnapsackSolver.MinimumError(layers, maxBytes);
            if (feasible.Count == 0)
            {
                Assert.Null(found);
                continue;
            }

            Assert.NotNull(found);
            PlanningInstances.AssertConsistent(layers, found);
            Assert.Equal(feasible.Min(a => a.Error), found.Error);
            Assert.True(found.Bytes <= maxBytes);
        }
    }

    [Fact]
    public void FrontierOfRealisticLayersWithFractionalErrorsMatchesBruteForce()
    {
        // Fractional errors: the solver must add them in layer order so sums match bit for bit.
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed: 7, layerCount: 4, choiceCount: 6, integerErrors: false);
        var expected = PlanningInstances.ParetoSet(PlanningInstances.Enumerate(layers));

        FrontierResult frontier = KnapsackSolver.Frontier(layers);

        Assert.Equal(expected, frontier.Bytes.Zip(frontier.Errors).ToList());
    }

    [Fact]
    public void ThinnedFrontierStaysWithinItsBytesBoundOfTheExactOne()
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed: 11, layerCount: 12, choiceCount: 5, integerErrors: false);
        FrontierResult exact = KnapsackSolver.Frontier(layers);
        Assert.True(exact.Exact);
        Assert.True(exact.Count > 200, $"the instance should have a large frontier, had {exact.Count}");

        FrontierResult thinned = KnapsackSolver.Frontier(layers, maxPoints: 50);

        Assert.False(thinned.Exact);
        Assert.True(thinned.Count <= 50);
        Assert.True(thinned.BytesFactorBound > 1.0);
        Assert.Equal(exact.Bytes[0], thinned.Bytes[0]);
        Assert.Equal(exact.Errors[^1], thinned.Errors[^1]);
        for (int i = 0; i < thinned.Count; i++)
        {
            Selection point = thinned[i];
            Assert.True(point.Thinned);
            PlanningInstances.AssertConsistent(layers, point);
            if (i > 0)
            {
                Assert.True(thinned.Bytes[i] > thinned.Bytes[i - 1] && thinned.Errors[i] < thinned.Errors[i - 1]);
            }
        }

        for (int j = 0; j < exact.Count; j++)
        {
            bool covered = Enumerable.Range(0, thinned.Count).Any(i =>
                thinned.Errors[i] <= exact.Errors[j] && thinned.Bytes[i] <= exact.Bytes[j] * thinned.BytesFactorBound);
            Assert.True(covered, $"exact point {j} ({exact.Bytes[j]} B, {exact.Errors[j]}) has no thinned point within the bound");
        }
    }

    [Theory]
    [InlineData(21, 0.05)]
    [InlineData(22, 0.3)]
    [InlineData(23, 0.7)]
    public void BudgetedAnswersStayFeasibleAndNoWorseThanGreedyWhenThinned(int seed, double fraction)
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed, layerCount: 30, choiceCount: 6, integerErrors: false);
        double least = layers.Sum(l => l.Choices.Min(c => c.Error));
        double maxError = least + ((layers.Sum(l => l.Choices.Max(c => c.Error)) - least) * fraction);
        long maxBytes = layers.Sum(l => l.Choices.Min(c => c.Bytes)) + (long)(layers.Sum(l => l.Choices.Max(c => c.Bytes)) * fraction * 0.5);

        Selection? exactBytes = KnapsackSolver.MinimumBytes(layers, maxError);
        Selection? thinBytes = KnapsackSolver.MinimumBytes(layers, maxError, maxPoints: 2);
        Selection? exactError = KnapsackSolver.MinimumError(layers, maxBytes);
        Selection? thinError = KnapsackSolver.MinimumError(layers, maxBytes, maxPoints: 2);

        Assert.NotNull(exactBytes);
        Assert.NotNull(thinBytes);
        Assert.False(exactBytes.Thinned);
        Assert.True(thinBytes.Thinned, "a cap of 2 points should force thinning on 30 layers, even on the reduced core");
        PlanningInstances.AssertConsistent(layers, thinBytes);
        Assert.True(thinBytes.Error <= maxError);
        Assert.InRange(thinBytes.Bytes, exactBytes.Bytes, GreedySolver.MinimumBytes(layers, maxError).Bytes);

        Assert.NotNull(exactError);
        Assert.NotNull(thinError);
        Assert.True(thinError.Thinned);
        PlanningInstances.AssertConsistent(layers, thinError);
        Assert.True(thinError.Bytes <= maxBytes);
        Assert.InRange(thinError.Error, exactError.Error, GreedySolver.MinimumError(layers, maxBytes).Error);
    }

    [Fact]
    public void PinnedLayersKeepTheirOnlyChoice()
    {
        List<PlanningLayer> layers =
        [
            new("a", [new(8, 100, 1), new(4, 50, 5)]),
            new("pinned", [new(32, 400, 0)]),
            new("b", [new(8, 100, 1), new(4, 50, 2)]),
        ];

        Selection? selection = KnapsackSolver.MinimumBytes(layers, maxError: 3);

        Assert.NotNull(selection);
        Assert.Equal([0, 0, 1], selection.ChoiceIndex);
        Assert.Equal(550, selection.Bytes);
        Assert.Equal(3.0, selection.Error);
    }

    [Fact]
    public void NoLayersGiveOneEmptyPoint()
    {
        FrontierResult frontier = KnapsackSolver.Frontier([]);

        Selection only = Assert.Single(frontier);
        Assert.Empty(only.ChoiceIndex);
        Assert.Equal(0, only.Bytes);
        Assert.Equal(0.0, only.Error);
    }

    [Theory]
    [InlineData(-1.0, 10L)]
    [InlineData(double.NaN, 10L)]
    [InlineData(1.0, -5L)]
    public void BadChoicesAreRefusedWithACode(double error, long bytes)
    {
        List<PlanningLayer> layers = [new("conv1", [new(4, bytes, error)])];

        var thrown = Assert.Throws<EngineException>(() => KnapsackSolver.Frontier(layers));

        Assert.Equal("invalid-choice-cost", thrown.Code);
        Assert.Contains("conv1", thrown.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void ALayerWithoutChoicesIsRefused()
    {
        var thrown = Assert.Throws<EngineException>(() => KnapsackSolver.MinimumBytes([new("conv1", [])], 1.0));

        Assert.Equal("layer-without-choices", thrown.Code);
    }

    [Fact]
    public void AFrontierLargerThanTheOldPointCapIsKeptWholeWhenItFitsInMemory()
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed: 77, layerCount: 60, choiceCount: 7, integerErrors: false);

        FrontierResult frontier = KnapsackSolver.Frontier(layers);
        FrontierResult unbounded = KnapsackSolver.Frontier(layers, int.MaxValue >> KnapsackSolver.ChoiceBits, long.MaxValue);

        Assert.True(unbounded.Count > KnapsackSolver.DefaultMaxPoints, $"the instance's frontier has only {unbounded.Count} points; it must exceed the old cap to test anything");
        Assert.True(frontier.Exact);
        Assert.Equal(unbounded.Bytes, frontier.Bytes);
        Assert.Equal(unbounded.Errors, frontier.Errors);
    }

    [Fact]
    public void AFrontierBeyondTheMemorySettingIsThinnedAndSaysSo()
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed: 77, layerCount: 60, choiceCount: 7, integerErrors: false);

        // 1 MiB holds far fewer points than this frontier, but never fewer than the old fixed cap per layer.
        FrontierResult frontier = KnapsackSolver.Frontier(layers, int.MaxValue >> KnapsackSolver.ChoiceBits, 1L << 20);

        Assert.False(frontier.Exact);
        Assert.InRange(frontier.Count, 2, KnapsackSolver.DefaultMaxPoints);
        Assert.True(frontier.BytesFactorBound > 1);
    }
}
