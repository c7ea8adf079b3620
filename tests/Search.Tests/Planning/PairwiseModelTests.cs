using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

public sealed class PairwiseModelTests
{
    // Three layers, choices 8 / 4 bits (index 0 / 1); errors in noise-power units.
    private static readonly PlanningLayer[] Layers =
    [
        new("a", [new PlanningChoice(8, 100, 0.001), new PlanningChoice(4, 50, 0.04)]),
        new("b", [new PlanningChoice(8, 100, 0.002), new PlanningChoice(4, 50, 0.09)]),
        new("c", [new PlanningChoice(8, 100, 0.0005), new PlanningChoice(4, 50, 0.01)]),
    ];

    [Fact]
    public void AMeasuredCombinationIsPredictedExactlyAndAnotherIsScaledByTheLayersOwnErrors()
    {
        var model = new PairwiseModel(Layers);

        // a and b at 4 bits together: joint 0.16 where the additive model says 0.13, so the term is 0.03.
        model.Add(new PairTerm(0, 1, 1, 1, 0.16, 0.16 - 0.04 - 0.09, "pair/a/b"));
        var measured = new Selection([1, 1, 1], 150, 0.04 + 0.09 + 0.01);
        Assert.Equal(0.16 + 0.01, model.Predict(measured), 12);

        // At 8 bits the correlation measured at 4 bits, 0.03 / (2 sqrt(0.04 * 0.09)) = 0.25, scales the bound 2 sqrt(e_a e_b)
        // of the 8-bit errors (Cauchy-Schwarz on the two output errors' inner product).
        var other = new Selection([0, 0, 1], 250, 0.001 + 0.002 + 0.01);
        Assert.Equal(0.013 + (0.25 * 2 * Math.Sqrt(0.001 * 0.002)), model.Predict(other), 12);

        // Errors that cancel cannot drive the prediction below zero.
        var cancelling = new PairwiseModel(Layers);
        cancelling.Add(new PairTerm(0, 1, 1, 1, 0, -1, "pair/a/b"));
        Assert.Equal(0, cancelling.Predict(measured));
    }

    [Fact]
    public void PairsAreRankedByTheProductOfTheLayersErrorsAtThePlannedWidthsAdjacentOrNot()
    {
        PlanningLayer[] layers =
        [
            new("first", [new PlanningChoice(4, 50, 0.05)]),
            new("quiet", [new PlanningChoice(4, 50, 0.001)]),
            new("kept", [new PlanningChoice(32, 400, 0)]),
            new("last", [new PlanningChoice(4, 50, 0.03)]),
            new("middle", [new PlanningChoice(4, 50, 0.01)]),
        ];
        var plan = new Selection([0, 0, 0, 0, 0], 600, 0.091);

        // Products: first*last 1.5e-3, first*middle 5e-4, last*middle 3e-4, first*quiet 5e-5, ...; "kept" adds no error.
        Assert.Equal([(0, 3), (0, 4), (3, 4)], PairRanking.Choose(layers, plan, 3));
        Assert.Equal([(0, 3)], PairRanking.Choose(layers, plan, 1));
        Assert.Empty(PairRanking.Choose(layers, plan, 0));
        Assert.Equal(6, PairRanking.Choose(layers, plan, 64).Count);
        Assert.DoesNotContain(PairRanking.Choose(layers, plan, 64), p => p.First == 2 || p.Second == 2);
    }
}
