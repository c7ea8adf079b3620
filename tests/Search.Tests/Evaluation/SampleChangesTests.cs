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

    private static OutputTensor Output(string name, float[] data, params long[] shape) => new(name, data, shape);
}
