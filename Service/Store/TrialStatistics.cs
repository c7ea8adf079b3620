using System.Globalization;
using System.Text;

namespace Bitbudget.Service.Store;

/// <summary>Aggregates over every stored trial, for the metrics endpoint.</summary>
internal sealed class TrialStatistics(Database database)
{
    /// <summary>Upper bounds of the trial duration histogram, in seconds (common practice: roughly x2.5 steps).</summary>
    public static IReadOnlyList<double> BucketsSeconds { get; } = [0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30];

    /// <summary>Cumulative counts per bucket (one per bound, then +Inf), the total count and the sum of durations in seconds.</summary>
    public (long[] Cumulative, long Count, double SumSeconds) DurationHistogram()
    {
        var sql = new StringBuilder("SELECT COUNT(*), COALESCE(SUM(duration_ms), 0)");
        foreach (var bound in BucketsSeconds)
        {
            sql.Append(CultureInfo.InvariantCulture, $", COALESCE(SUM(CASE WHEN duration_ms <= {bound * 1000} THEN 1 ELSE 0 END), 0)");
        }

        sql.Append(" FROM trials;");
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql.ToString();
        using var reader = command.ExecuteReader();
        reader.Read();
        var count = reader.GetInt64(0);
        var cumulative = new long[BucketsSeconds.Count + 1];
        for (var i = 0; i < BucketsSeconds.Count; i++)
        {
            cumulative[i] = reader.GetInt64(2 + i);
        }

        cumulative[^1] = count;
        return (cumulative, count, reader.GetDouble(1) / 1000);
    }
}
