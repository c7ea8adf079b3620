namespace Bitbudget.Service.Store;

/// <summary>
/// The trial duration histogram for the metrics endpoint, read from counters that a trigger updates in
/// the transaction that stores each trial (migration 2), so a scrape reads twelve rows however many
/// trials are stored.
/// </summary>
internal sealed class TrialStatistics(Database database)
{
    /// <summary>
    /// Upper bounds of the trial duration histogram, in seconds (common practice: roughly x2.5 steps).
    /// Migration 2 holds the same bounds in milliseconds in <c>trial_buckets.upper_ms</c>.
    /// </summary>
    public static IReadOnlyList<double> BucketsSeconds { get; } = [0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30];

    /// <summary>Cumulative counts per bucket (one per bound, then +Inf), the total count and the sum of durations in seconds.</summary>
    public (long[] Cumulative, long Count, double SumSeconds) DurationHistogram()
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = "SELECT bucket, count, sum_ms FROM trial_buckets ORDER BY bucket;";
        using var reader = command.ExecuteReader();
        var cumulative = new long[BucketsSeconds.Count + 1];
        var sumMs = 0.0;
        while (reader.Read())
        {
            var bucket = Math.Min(reader.Int(0), cumulative.Length - 1);
            cumulative[bucket] += reader.Long(1);
            sumMs += reader.GetDouble(2);
        }

        for (var i = 1; i < cumulative.Length; i++)
        {
            cumulative[i] += cumulative[i - 1];
        }

        return (cumulative, cumulative[^1], sumMs / 1000);
    }
}
