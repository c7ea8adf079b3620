using System.Globalization;

namespace Bitbudget.Benchmarks;

/// <summary>Median, fastest and slowest of repeated timings, in ms.</summary>
internal sealed record Spread(double Median, double Min, double Max)
{
    public override string ToString() => string.Create(CultureInfo.InvariantCulture, $"{Median:0.0} ms ({Min:0.0}-{Max:0.0})");
}
