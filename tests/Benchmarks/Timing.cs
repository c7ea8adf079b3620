using System.Diagnostics;

namespace Bitbudget.Benchmarks;

/// <summary>Median wall time of repeated runs, after one warm-up run.</summary>
internal static class Timing
{
    public static double MedianMilliseconds(int repeat, Action action) => Measure(repeat, action).Median;

    /// <summary>Median, fastest and slowest of <paramref name="repeat"/> timed runs after one warm-up run, in ms.</summary>
    public static Spread Measure(int repeat, Action action)
    {
        action();
        var times = new double[repeat];
        for (var i = 0; i < repeat; i++)
        {
            var clock = Stopwatch.StartNew();
            action();
            times[i] = clock.Elapsed.TotalMilliseconds;
        }

        Array.Sort(times);
        return new Spread(times[repeat / 2], times[0], times[^1]);
    }
}
