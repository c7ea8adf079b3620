using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// Layers the calibration set does not reach are flagged and kept at the highest candidate width instead of
/// being handed the fewest bits for measuring "lossless" at every width.
/// </summary>
public sealed class CoverageTests
{
    private const int Samples = 200;
    private static readonly int[] Bits = [2, 4, 8];

    [Fact]
    public void ElseBranchNoSampleTakesIsNotExercisedAndKeepsTheHighestWidth()
    {
        var (model, data) = BranchModel();

        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 20), Bits), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        var layers = ManifestJson.Deserialize(result.ManifestJson).Layers.ToDictionary(l => l.Name);
        var untaken = layers["branch/else_branch/fc_else"];
        Assert.Equal(("not-exercised", 0, Samples), (untaken.Coverage!.Status, untaken.Coverage.SamplesChanged, untaken.Coverage.Samples));
        Assert.Equal(8, untaken.Bits);
        Assert.Contains("not exercised", untaken.Coverage.Reason);

        // Its trials really measured "lossless" at every width: that is what used to hand it 2 bits.
        Assert.All(untaken.Sensitivity, s => Assert.True(double.IsPositiveInfinity(s.Metrics.SqnrDb!.Value)));
        Assert.Contains(result.Warnings!, w => w.Contains("'branch/else_branch/fc_else' is not exercised", StringComparison.Ordinal));

        var taken = layers["branch/then_branch/fc_then"];
        Assert.Equal(("exercised", Samples), (taken.Coverage!.Status, taken.Coverage.SamplesChanged));
        Assert.Null(taken.Coverage.Reason);
    }

    [Fact]
    public void LayerReachedByOneSampleInTwoHundredIsBarelyExercisedAndKeepsTheHighestWidth()
    {
        var (model, data) = BranchModel();

        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 20), Bits), new InMemoryTrialStore(), null, CancellationToken.None);

        var rare = ManifestJson.Deserialize(result.ManifestJson).Layers.Single(l => l.Name == "rare");
        Assert.Equal(("barely-exercised", 1), (rare.Coverage!.Status, rare.Coverage.SamplesChanged));
        Assert.Equal(8, rare.Bits);
        Assert.Contains(result.Warnings!, w => w.Contains("'rare' is barely exercised", StringComparison.Ordinal));
    }

    [Fact]
    public void PinnedLayerThatIsNotExercisedKeepsItsPinAndIsStillFlagged()
    {
        var (model, data) = BranchModel();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 20), Bits, Pins: new Dictionary<string, int> { ["branch/else_branch/fc_else"] = 4 });

        var result = SearchRunner.Run(model, data, settings, new InMemoryTrialStore(), null, CancellationToken.None);

        var untaken = ManifestJson.Deserialize(result.ManifestJson).Layers.Single(l => l.Name == "branch/else_branch/fc_else");
        Assert.Equal((4, "not-exercised"), (untaken.Bits, untaken.Coverage!.Status));
        Assert.Contains("keeps 4 bits", untaken.Coverage.Reason);
    }

    [Fact]
    public void ExercisedLayersAreNotFlaggedAndTheSmallModelHasNoWarnings()
    {
        var model = SmallModels.Mlp();
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), Bits), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.Empty(result.Warnings!);
        Assert.All(ManifestJson.Deserialize(result.ManifestJson).Layers, l => Assert.Equal(("exercised", 48), (l.Coverage!.Status, l.Coverage.SamplesChanged)));
    }

    [Theory]
    [InlineData(new[] { 0, 0, 0 }, CoverageStatus.NotExercised)]
    [InlineData(new[] { 0, 1, 0 }, CoverageStatus.BarelyExercised)]
    [InlineData(new[] { 0, 1, 2 }, CoverageStatus.Exercised)]
    public void OnePercentOfTwoHundredSamplesIsTheBarelyExercisedLine(int[] changed, CoverageStatus expected)
    {
        var coverage = LayerCoverage.Judge("l", changed.Select(c => (int?)c).ToList(), Samples, 8);

        Assert.Equal(expected, coverage.Status);
        Assert.Equal(expected == CoverageStatus.Exercised ? null : 8, coverage.KeptBits);
    }

    [Fact]
    public void TrialsStoredWithoutSampleCountsAreTakenAsExercised() =>
        Assert.Equal(CoverageStatus.Exercised, LayerCoverage.Judge("l", [0, null], Samples, 8).Status);

    /// <summary>
    /// x [n,4]: If(sum(x) > -1e6) then MatMul(x, w_then) else MatMul(x, w_else), plus MatMul(Relu(x - 5), w_rare).
    /// No sample takes the else branch; only sample 0 (all 10s) gets past the Relu.
    /// </summary>
    private static (OnnxModel Model, CalibrationSet Data) BranchModel()
    {
        var then = new GraphBuilder()
            .Node("MatMul", ["x", "w_then"], ["then_out"], "fc_then")
            .Output("then_out", -1, 3)
            .BuildGraph();
        var otherwise = new GraphBuilder()
            .Node("MatMul", ["x", "w_else"], ["else_out"], "fc_else")
            .Output("else_out", -1, 3)
            .BuildGraph();
        var bytes = new GraphBuilder()
            .Input("x", -1, 4)
            .Initializer("w_then", [4, 3], GraphBuilder.RandomValues(1, 12))
            .Initializer("w_else", [4, 3], GraphBuilder.RandomValues(2, 12))
            .Initializer("w_rare", [4, 3], GraphBuilder.RandomValues(3, 12))
            .Initializer("floor", [], [-1e6f])
            .Initializer("five", [], [5f])
            .Node("ReduceSum", ["x"], ["total"], "total", GraphBuilder.IntAttribute("keepdims", 0))
            .Node("Greater", ["total", "floor"], ["cond"], "cond")
            .Node("If", ["cond"], ["branch_out"], "branch", GraphBuilder.GraphAttribute("then_branch", then), GraphBuilder.GraphAttribute("else_branch", otherwise))
            .Node("Sub", ["x", "five"], ["shifted"], "shift")
            .Node("Relu", ["shifted"], ["gated"], "gate")
            .Node("MatMul", ["gated", "w_rare"], ["rare_out"], "rare")
            .Node("Add", ["branch_out", "rare_out"], ["y"], "sum")
            .Output("y", -1, 3)
            .ToBytes();
        var model = OnnxModel.Load(bytes, "branchy");
        var x = GraphBuilder.RandomValues(4, Samples * 4);
        Array.Fill(x, 10f, 0, 4);
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [Samples, 4], x)], model.Inputs);
        return (model, data);
    }
}
