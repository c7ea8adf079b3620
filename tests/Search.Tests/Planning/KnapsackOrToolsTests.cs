using Bitbudget.Search.Planning;
using Google.OrTools.Sat;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// Reference: Google OR-Tools 9.15 CP-SAT (Google.OrTools.Sat.CpModel), an exact general-purpose
/// solver, on the same multiple-choice knapsack: one Boolean per (layer, choice), exactly one per
/// layer, the budget as a linear constraint and the other total as the objective. The instances use
/// integer-valued errors (below 2^53 in every sum) so both solvers see identical numbers.
/// </summary>
public class KnapsackOrToolsTests
{
    public static TheoryData<int, int, int> Instances()
    {
        var data = new TheoryData<int, int, int>();
        (int Layers, int Choices)[] shapes = [(3, 2), (4, 3), (5, 4), (8, 3), (10, 5), (15, 4), (20, 6), (25, 5), (30, 6), (40, 6)];
        int seed = 100;
        foreach ((int layers, int choices) in shapes)
        {
            for (int repeat = 0; repeat < 3; repeat++)
            {
                data.Add(seed++, layers, choices);
            }
        }

        return data;
    }

    [Theory]
    [MemberData(nameof(Instances))]
    public void MinimumBytesUnderAnErrorBudgetMatchesCpSat(int seed, int layerCount, int choiceCount)
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed, layerCount, choiceCount, integerErrors: true);
        double least = layers.Sum(l => l.Choices.Min(c => c.Error));
        double most = layers.Sum(l => l.Choices.Max(c => c.Error));
        double maxError = Math.Floor(least + ((most - least) * BudgetFraction(seed)));

        Selection? ours = KnapsackSolver.MinimumBytes(layers, maxError);
        long? reference = SolveWithCpSat(layers, minimiseBytes: true, (long)maxError);

        Assert.NotNull(reference);
        Assert.NotNull(ours);
        PlanningInstances.AssertConsistent(layers, ours);
        Assert.True(ours.Error <= maxError);
        Assert.Equal(reference.Value, ours.Bytes);

        Selection greedy = GreedySolver.MinimumBytes(layers, maxError);
        PlanningInstances.AssertConsistent(layers, greedy);
        Assert.True(greedy.Error <= maxError);
        Assert.True(greedy.Bytes >= reference.Value, $"greedy {greedy.Bytes} B beat the exact optimum {reference.Value} B");
    }

    [Theory]
    [MemberData(nameof(Instances))]
    public void MinimumErrorUnderASizeBudgetMatchesCpSat(int seed, int layerCount, int choiceCount)
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(seed, layerCount, choiceCount, integerErrors: true);
        long least = layers.Sum(l => l.Choices.Min(c => c.Bytes));
        long most = layers.Sum(l => l.Choices.Max(c => c.Bytes));
        long maxBytes = least + (long)((most - least) * BudgetFraction(seed) * 0.5);

        Selection? ours = KnapsackSolver.MinimumError(layers, maxBytes);
        long? reference = SolveWithCpSat(layers, minimiseBytes: false, maxBytes);

        Assert.NotNull(reference);
        Assert.NotNull(ours);
        PlanningInstances.AssertConsistent(layers, ours);
        Assert.True(ours.Bytes <= maxBytes);
        Assert.Equal(reference.Value, ours.Error);

        Selection greedy = GreedySolver.MinimumError(layers, maxBytes);
        PlanningInstances.AssertConsistent(layers, greedy);
        Assert.True(greedy.Bytes <= maxBytes);
        Assert.True(greedy.Error >= reference.Value, $"greedy error {greedy.Error} beat the exact optimum {reference.Value}");
    }

    [Fact]
    public void InfeasibleErrorBudgetIsInfeasibleForBoth()
    {
        List<PlanningLayer> layers = PlanningInstances.Realistic(5, 6, 4, integerErrors: true);
        long least = (long)layers.Sum(l => l.Choices.Min(c => c.Error));

        Assert.Null(KnapsackSolver.MinimumBytes(layers, least - 1));
        Assert.Null(SolveWithCpSat(layers, minimiseBytes: true, least - 1));
        Assert.NotNull(KnapsackSolver.MinimumBytes(layers, least));
    }

    // Budgets spread over the whole range, from nearly the tightest to loose.
    private static double BudgetFraction(int seed) => 0.02 + (0.9 * new Random(seed * 31).NextDouble() * new Random(seed * 17).NextDouble());

    /// <summary>The optimum objective CP-SAT proves, or null when it proves the budget infeasible.</summary>
    private static long? SolveWithCpSat(IReadOnlyList<PlanningLayer> layers, bool minimiseBytes, long budget)
    {
        var model = new CpModel();
        var literals = new List<BoolVar>();
        var bytes = new List<long>();
        var errors = new List<long>();
        for (int i = 0; i < layers.Count; i++)
        {
            var mine = new List<BoolVar>();
            for (int c = 0; c < layers[i].Choices.Count; c++)
            {
                BoolVar x = model.NewBoolVar($"x_{i}_{c}");
                mine.Add(x);
                literals.Add(x);
                bytes.Add(layers[i].Choices[c].Bytes);
                errors.Add(checked((long)layers[i].Choices[c].Error));
            }

            model.AddExactlyOne(mine);
        }

        LinearExpr totalBytes = LinearExpr.WeightedSum(literals, bytes);
        LinearExpr totalError = LinearExpr.WeightedSum(literals, errors);
        if (minimiseBytes)
        {
            model.Add(totalError <= budget);
            model.Minimize(totalBytes);
        }
        else
        {
            model.Add(totalBytes <= budget);
            model.Minimize(totalError);
        }

        var solver = new CpSolver { StringParameters = "num_workers:2 max_time_in_seconds:20 random_seed:1" };
        CpSolverStatus status = solver.Solve(model);
        if (status == CpSolverStatus.Infeasible)
        {
            return null;
        }

        Assert.Equal(CpSolverStatus.Optimal, status);
        return checked((long)Math.Round(solver.ObjectiveValue));
    }
}
