using System.Diagnostics;

namespace Bitbudget.Benchmarks;

/// <summary>Median wall time of repeated runs, after one warm-up run.</summary>
internal static class Timing
{
    public static double MedianMilliseconds(int repeat, Action action)
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
        return times[repeat / 2];
    }
}
