using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Tests.Evaluation;

public sealed class SampleChangesTests
{
    [Fact]
    public void CountsSamplesWithAnyOutputBitChangedAcrossOutputs()
    {
        var reference = new[] { Output("a", [1, 2, 3, 4, 5, 6], 3, 2), Output("b", [1, 2, 3], 3) };
        var trial = new[] { Output("a", [1, 2, 3, 4.0000005f, 5, 6], 3, 2), Output("b", [1, 2, -3], 3) };

        Assert.Equal(2, SampleChanges.Count(reference, trial, 3));
        Assert.Equal(0, SampleChanges.Count(reference, reference, 3));
    }

    [Fact]
    public void NegativeZeroIsAChangeAndAnOutputWithoutASampleAxisCountsEverySample()
    {
        var reference = new[] { Output("a", [0, 1], 2) };
        Assert.Equal(1, SampleChanges.Count(reference, [Output("a", [-0f, 1], 2)], 2));

        var pooled = new[] { Output("a", [0, 1], 2), Output("mean", [0.5f]) };
        Assert.Equal(2, SampleChanges.Count(pooled, [Output("a", [0, 1], 2), Output("mean", [0.25f])], 2));
    }

    [Fact]
    public void SamplesAreFoundAlongEachOutputsOwnSampleAxis()
    {
        // A next state [2, 3 samples, 2]: sample 1's values sit at [0,1,:] and [1,1,:] (flat 2..3 and 8..9).
        var reference = new OutputTensor("state", [0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11], [2, 3, 2], SampleAxis: 1);
        var changedInSecondBlock = (float[])reference.Data.Clone();
        changedInSecondBlock[9] = -9;

        Assert.Equal(1, SampleChanges.Count([reference], [reference with { Data = changedInSecondBlock }], 3));
        // Read as samples on axis 0 (2 of them) the same change could not be placed, and would count every sample.
        Assert.Equal(3, SampleChanges.Count([reference with { SampleAxis = null }], [reference with { SampleAxis = null, Data = changedInSecondBlock }], 3));
    }

    private static OutputTensor Output(string name, float[] data, params long[] shape) => new(name, data, shape);
}
