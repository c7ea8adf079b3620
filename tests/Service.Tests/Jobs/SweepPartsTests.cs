using Bitbudget.Service.Engine;
using Bitbudget.Service.Jobs;

namespace Bitbudget.Service.Tests.Jobs;

public sealed class SweepPartsTests
{
    [Fact]
    public void SplitKeepsLayerOrderAndWholeLayersAndBalancesTrials()
    {
        var plan = Enumerable.Range(0, 10).Select(i => new LayerTrials($"l{i}", i == 3 ? 12 : 3)).ToList();

        var parts = SweepParts.Split(plan, 4);

        Assert.Equal(plan.Select(l => l.Layer), parts.SelectMany(p => p).Select(l => l.Layer));
        Assert.InRange(parts.Count, 2, 4);
        // 39 trials over at most 4 parts: none holds more than the big layer plus a neighbour's worth.
        Assert.All(parts, p => Assert.InRange(p.Sum(l => l.Trials), 3, 15));
    }

    [Fact]
    public void SplitNeverMakesMorePartsThanLayersWithTrials()
    {
        var plan = new List<LayerTrials> { new("a", 2), new("skipped", 0), new("b", 2) };

        Assert.Equal(2, SweepParts.Split(plan, 8).Count);
        Assert.Single(SweepParts.Split(plan, 1));
    }
}
