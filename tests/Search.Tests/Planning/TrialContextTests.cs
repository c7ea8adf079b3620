using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// What a sensitivity trial's context covers: every input and setting that changes what a trial measures changes
/// the context (so a cache never serves a stale trial), and the choices made after the sweep do not (so a search
/// with only another budget reuses the sweep).
/// </summary>
public sealed class TrialContextTests
{
    private const string Model = "aa00000000000000000000000000000000000000000000000000000000000000";
    private const string Data = "bb00000000000000000000000000000000000000000000000000000000000000";
    private static readonly SearchSettings Base = new(new ErrorBudget(BudgetMetric.Sqnr, 30), [2, 4, 8]);

    public static TheoryData<string, SearchSettings> MeasurementChanges => new()
    {
        { "scheme", Base with { Scheme = QuantizationScheme.Asymmetric } },
        { "granularity", Base with { Granularity = Granularity.PerTensor } },
        { "clip", Base with { Clip = ClipMethod.MseOptimal } },
        { "activations", Base with { QuantizeActivations = true } },
        { "activations at a percentile", Base with { QuantizeActivations = true, Clip = ClipMethod.Percentile } },
        { "target opset", Base with { TargetOpset = 21 } },
        { "metric space", Base with { MetricSpace = MetricSpace.Logit } },
        { "sample axes", Base with { SampleAxes = new Dictionary<string, int> { ["input"] = 1 } } },
    };

    public static TheoryData<string, SearchSettings> ChoicesAfterTheSweep => new()
    {
        { "budget", Base with { Budget = new ErrorBudget(BudgetMetric.Sqnr, 20) } },
        { "size budget", Base with { Budget = new SizeBudget(1000, null) } },
        { "method", Base with { Method = SearchMethod.Greedy } },
        { "bits", Base with { Bits = [3, 5] } },
        { "roundings (each trial's key names its own)", Base with { Rounding = [RoundingMethod.Nearest, RoundingMethod.Compensated] } },
        { "pins", Base with { Pins = new Dictionary<string, int> { ["fc1"] = 8 } } },
        { "exclusions", Base with { Excluded = ["fc1"] } },
        { "judged outputs", Base with { Outputs = ["probability"] } },
        { "storage", Base with { Storage = StorageRule.Packed } },
    };

    [Theory]
    [MemberData(nameof(MeasurementChanges))]
    public void ASettingThatChangesWhatATrialMeasuresChangesTheContext(string what, SearchSettings changed) =>
        Assert.True(TrialContext.Of(Model, Data, Base) != TrialContext.Of(Model, Data, changed), $"Changing the {what} kept the context.");

    [Theory]
    [MemberData(nameof(ChoicesAfterTheSweep))]
    public void AChoiceMadeAfterTheSweepKeepsTheContext(string what, SearchSettings changed) =>
        Assert.True(TrialContext.Of(Model, Data, Base) == TrialContext.Of(Model, Data, changed), $"Changing the {what} changed the context.");

    [Fact]
    public void AnotherModelDatasetOrBatchSizeChangesTheContext()
    {
        var context = TrialContext.Of(Model, Data, Base);
        Assert.NotEqual(context, TrialContext.Of(Model.Replace("aa", "ab", StringComparison.Ordinal), Data, Base));
        Assert.NotEqual(context, TrialContext.Of(Model, Data.Replace("bb", "bc", StringComparison.Ordinal), Base));
        Assert.NotEqual(context, TrialContext.Of(Model, Data, Base, new TrialSessionOptions(MaxBatch: 8)));
    }

    [Fact]
    public void SampleAxesInAnyOrderGiveOneContext()
    {
        var one = Base with { SampleAxes = new Dictionary<string, int> { ["a"] = 0, ["b"] = 1 } };
        var other = Base with { SampleAxes = new Dictionary<string, int> { ["b"] = 1, ["a"] = 0 } };
        Assert.Equal(TrialContext.Of(Model, Data, one), TrialContext.Of(Model, Data, other));
    }

    [Fact]
    public void HashBytesIsTheSha256OfTheBytes() =>
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        Assert.Equal("ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", TrialContext.HashBytes("abc"u8));
}
