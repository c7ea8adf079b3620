using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

public class AdditiveErrorTests
{
    private static readonly MetricSet Reference = new(0, double.PositiveInfinity, 1, 0, 1, 0.90);

    [Fact]
    public void ThirtyDecibelsIsOneThousandthOfTheSignalPower()
    {
        Assert.Equal(1e-3, AdditiveError.LimitToAdditive(BudgetMetric.Sqnr, 30), 15);
        Assert.Equal(30.0, AdditiveError.FromAdditive(BudgetMetric.Sqnr, 1e-3), 12);
        Assert.Equal(0.0, AdditiveError.ValueToAdditive(BudgetMetric.Sqnr, double.PositiveInfinity));
        Assert.Equal(double.PositiveInfinity, AdditiveError.FromAdditive(BudgetMetric.Sqnr, 0));
    }

    [Theory]
    [InlineData(BudgetMetric.Sqnr, 23.5)]
    [InlineData(BudgetMetric.RelativeMse, 0.004)]
    [InlineData(BudgetMetric.Top1Agreement, 0.985)]
    [InlineData(BudgetMetric.KlDivergence, 0.02)]
    [InlineData(BudgetMetric.CosineSimilarity, 0.9993)]
    [InlineData(BudgetMetric.AccuracyDrop, 0.5)]
    public void ValuesRoundTripThroughTheAdditiveQuantity(BudgetMetric metric, double value)
    {
        double additive = AdditiveError.ValueToAdditive(metric, value);

        Assert.True(additive > 0);
        Assert.Equal(value, AdditiveError.FromAdditive(metric, additive, Reference), 12);
    }

    [Fact]
    public void EachTrialMapsToItsMetricsAdditiveQuantity()
    {
        var trial = new MetricSet(0.002, 10 * Math.Log10(1 / 0.002), 0.97, 0.015, 0.998, 0.885);

        Assert.Equal(0.002, AdditiveError.ToAdditive(BudgetMetric.Sqnr, trial, Reference), 15);
        Assert.Equal(0.002, AdditiveError.ToAdditive(BudgetMetric.RelativeMse, trial, Reference));
        Assert.Equal(0.03, AdditiveError.ToAdditive(BudgetMetric.Top1Agreement, trial, Reference), 15);
        Assert.Equal(0.015, AdditiveError.ToAdditive(BudgetMetric.KlDivergence, trial, Reference));
        Assert.Equal(0.002, AdditiveError.ToAdditive(BudgetMetric.CosineSimilarity, trial, Reference), 15);
        Assert.Equal(1.5, AdditiveError.ToAdditive(BudgetMetric.AccuracyDrop, trial, Reference), 12); // 90% -> 88.5%: 1.5 points
    }

    [Fact]
    public void ALayerThatRaisesAccuracyEarnsNoCredit()
    {
        var better = new MetricSet(0.001, 30, 0.99, 0.01, 0.999, 0.91);
        Assert.Equal(0.0, AdditiveError.ToAdditive(BudgetMetric.AccuracyDrop, better, Reference));
        Assert.Equal(0.0, AdditiveError.ValueToAdditive(BudgetMetric.CosineSimilarity, 1.0000001));
    }

    [Theory]
    [InlineData(BudgetMetric.Sqnr, 30.0, 30.0, true)]
    [InlineData(BudgetMetric.Sqnr, 30.0, 29.9, false)]
    [InlineData(BudgetMetric.RelativeMse, 0.001, 0.001, true)]
    [InlineData(BudgetMetric.RelativeMse, 0.001, 0.0011, false)]
    [InlineData(BudgetMetric.Top1Agreement, 0.99, 0.995, true)]
    [InlineData(BudgetMetric.Top1Agreement, 0.99, 0.985, false)]
    [InlineData(BudgetMetric.KlDivergence, 0.01, 0.009, true)]
    [InlineData(BudgetMetric.KlDivergence, 0.01, 0.02, false)]
    [InlineData(BudgetMetric.CosineSimilarity, 0.999, 0.9995, true)]
    [InlineData(BudgetMetric.CosineSimilarity, 0.999, 0.998, false)]
    [InlineData(BudgetMetric.AccuracyDrop, 0.5, 0.4, true)]
    [InlineData(BudgetMetric.AccuracyDrop, 0.5, 0.6, false)]
    public void MeetsFollowsEachMetricsDirection(BudgetMetric metric, double limit, double value, bool meets)
    {
        var measured = metric switch
        {
            BudgetMetric.Sqnr => Reference with { SqnrDb = value },
            BudgetMetric.RelativeMse => Reference with { RelativeMse = value },
            BudgetMetric.Top1Agreement => Reference with { Top1Agreement = value },
            BudgetMetric.KlDivergence => Reference with { KlDivergence = value },
            BudgetMetric.CosineSimilarity => Reference with { CosineSimilarity = value },
            _ => Reference with { Accuracy = Reference.Accuracy - (value / 100) },
        };

        Assert.Equal(meets, AdditiveError.Meets(metric, limit, measured, Reference));
        // The additive model agrees on direction: meeting the budget is staying at or under its additive limit.
        Assert.Equal(meets, AdditiveError.ToAdditive(metric, measured, Reference) <= AdditiveError.LimitToAdditive(metric, limit) * (1 + 1e-12));
    }

    [Fact]
    public void AccuracyDropWithoutLabelsIsRefused()
    {
        var unlabelled = Reference with { Accuracy = null };

        var thrown = Assert.Throws<EngineException>(() => AdditiveError.ToAdditive(BudgetMetric.AccuracyDrop, unlabelled, unlabelled));

        Assert.Equal("accuracy-needs-labels", thrown.Code);
    }

    [Theory]
    [InlineData(BudgetMetric.Top1Agreement, 1.5)]
    [InlineData(BudgetMetric.CosineSimilarity, -2.0)]
    [InlineData(BudgetMetric.RelativeMse, -0.1)]
    [InlineData(BudgetMetric.Sqnr, double.NaN)]
    public void LimitsOutsideTheMetricsRangeAreRefused(BudgetMetric metric, double limit)
    {
        Assert.Equal("invalid-budget-limit", Assert.Throws<EngineException>(() => AdditiveError.LimitToAdditive(metric, limit)).Code);
    }

    [Fact]
    public void NoisePowersOfIndependentLayersAdd()
    {
        // Outside fact: the variance of a sum of independent zero-mean noises is the sum of their
        // variances, which is what lets SQNR budgets sum relative noise power over layers.
        var random = new Random(3);
        const int n = 200_000;
        double signal = 0, first = 0, second = 0, both = 0;
        for (int i = 0; i < n; i++)
        {
            double y = Gaussian(random);
            double a = 0.03 * Gaussian(random);
            double b = 0.05 * (random.NextDouble() - 0.5);
            signal += y * y;
            first += a * a;
            second += b * b;
            both += (a + b) * (a + b);
        }

        double predicted = AdditiveError.FromAdditive(BudgetMetric.Sqnr, (first / signal) + (second / signal));
        double measured = 10 * Math.Log10(signal / both);
        Assert.InRange(predicted - measured, -0.05, 0.05); // dB
    }

    private static double Gaussian(Random random) =>
        Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
}
