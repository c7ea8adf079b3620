using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Demo;

public sealed class Pcg32Tests
{
    [Fact]
    public void FirstOutputsMatchThePublishedDemoSequenceForSeed42Stream54()
    {
        // pcg32-demo of the PCG reference C library (pcg-random.org), pcg32_srandom_r(42, 54):
        // the first six 32-bit outputs. Values quoted from memory of that demo's printed output.
        var random = new Pcg32(42, 54);
        uint[] expected = [0xa15c02b7, 0x7b47f409, 0xba1d3330, 0x83d2f293, 0xbfa4784b, 0xcbed606e];
        Assert.Equal(expected, Enumerable.Range(0, expected.Length).Select(_ => random.NextUInt32()));
    }

    [Fact]
    public void BoundedDrawsStayInRangeAndCoverEveryValue()
    {
        var random = new Pcg32(7);
        var seen = new int[5];
        for (int i = 0; i < 5000; i++)
        {
            seen[random.NextInt(5)]++;
        }

        Assert.All(seen, count => Assert.InRange(count, 900, 1100));
    }

    [Fact]
    public void GaussianDrawsHaveUnitVarianceAndZeroMean()
    {
        var random = new Pcg32(11);
        double[] draws = Enumerable.Range(0, 20000).Select(_ => random.NextGaussian()).ToArray();
        double mean = draws.Average();
        double variance = draws.Select(d => (d - mean) * (d - mean)).Average();
        // Standard error of the mean is 1/sqrt(20000) ~ 0.007; of the variance ~ sqrt(2/20000) ~ 0.01.
        Assert.InRange(mean, -0.03, 0.03);
        Assert.InRange(variance, 0.95, 1.05);
    }
}
