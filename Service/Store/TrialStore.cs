using System.Data.Common;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Store;

/// <summary>
/// The engine's <see cref="ITrialStore"/> over the trials table, for one search. A key is stored at most
/// once (UNIQUE(search_id, key) with ON CONFLICT DO NOTHING), so a rerun or a second concurrent run of the
/// same search cannot duplicate a trial. Given <paramref name="reuseFrom"/> (earlier searches with the same
/// <see cref="TrialContext"/>), their sensitivity trials become this search's too, so it does not sweep again:
/// each is copied under this search, marked with the search that measured it (<see cref="TrialRecord.ReusedFrom"/>),
/// so this search's trial list (<see cref="Page"/>) holds every trial its result rests on and its count is the
/// manifest's. The earlier searches' rows are only read.
/// </summary>
/// <param name="measuredBy">The worker that measures through this store (kept with each trial it saves), or null.</param>
internal sealed class TrialStore(Database database, string searchId, IReadOnlyList<string>? reuseFrom = null, string? measuredBy = null) : ITrialStore
{
    /// <summary>The columns <see cref="ReadTrial"/> reads, in its order.</summary>
    private const string Columns = "key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, assignment_json, activations, reused_from";

    public IReadOnlyDictionary<string, TrialRecord> LoadAll()
    {
        // Adopted on every load, not once: an earlier search still sweeping may have stored more since the last one.
        if (reuseFrom is { Count: > 0 })
        {
            Adopt(reuseFrom);
        }

        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = $"SELECT {Columns} FROM trials WHERE search_id = @id ORDER BY {database.Dialect.InsertOrder};";
        command.With("@id", searchId);
        var trials = new Dictionary<string, TrialRecord>(StringComparer.Ordinal);
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            var trial = ReadTrial(reader);
            trials[trial.Key] = trial;
        }

        return trials;
    }

    public void Save(TrialRecord trial)
    {
        ArgumentNullException.ThrowIfNull(trial);
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = """
            INSERT INTO trials (search_id, key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, created_at, measured_by, assignment_json, activations)
            VALUES (@id, @key, @kind, @layer, @bits, @hash, @metrics, @duration, @at, @by, @assignment, @activations)
            ON CONFLICT(search_id, key) DO NOTHING;
            """;
        command.With("@id", searchId);
        command.With("@key", trial.Key);
        command.With("@kind", trial.Kind);
        command.With("@layer", (object?)trial.Layer ?? DBNull.Value);
        command.With("@bits", (object?)trial.Bits ?? DBNull.Value);
        command.With("@hash", (object?)trial.AssignmentHash ?? DBNull.Value);
        command.With("@metrics", StoreJson.Write(trial.Metrics));
        command.With("@duration", trial.DurationMs);
        command.With("@at", Clock.Format(DateTimeOffset.UtcNow));
        command.With("@by", measuredBy);
        command.With("@assignment", trial.Assignment is null ? DBNull.Value : StoreJson.Write(trial.Assignment));
        command.With("@activations", trial.Activations is { } activations ? WireNames.Format(activations) : DBNull.Value);
        command.ExecuteNonQuery();
    }

    /// <summary>
    /// Copies the sensitivity trials of <paramref name="searchIds"/> that this search lacks, the earliest stored
    /// first for each key, keeping their measurement (metrics, duration, time) and naming the search that measured
    /// them: a trial an earlier search itself reused names the search it came from, not the one in between.
    /// </summary>
    private void Adopt(IReadOnlyList<string> searchIds)
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        var names = searchIds.Select((_, i) => $"@s{i}").ToList();
        command.CommandText = $"""
            INSERT INTO trials (search_id, key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, created_at, measured_by, assignment_json, activations, reused_from)
            SELECT @id, key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, created_at, NULL, assignment_json, activations, COALESCE(reused_from, search_id)
            FROM trials WHERE kind = 'sensitivity' AND search_id IN ({string.Join(", ", names)}) ORDER BY {database.Dialect.InsertOrder}
            ON CONFLICT(search_id, key) DO NOTHING;
            """;
        command.With("@id", searchId);
        for (var i = 0; i < names.Count; i++)
        {
            command.With(names[i], searchIds[i]);
        }

        command.ExecuteNonQuery();
    }

    /// <summary>How many trials each worker measured for this search (trials saved without a worker name, and reused ones, are left out).</summary>
    public IReadOnlyDictionary<string, int> CountByWorker()
    {
        using var connection = database.Open();
        using var command = connection.Command("SELECT measured_by, COUNT(*) FROM trials WHERE search_id = @id AND measured_by IS NOT NULL AND reused_from IS NULL GROUP BY measured_by;")
            .With("@id", searchId);
        var counts = new Dictionary<string, int>(StringComparer.Ordinal);
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            counts[reader.GetString(0)] = reader.Int(1);
        }

        return counts;
    }

    /// <summary>
    /// One page of trials in the order they were stored (reused ones first, as they are adopted before the sweep),
    /// how many there are in all, and how many of them were reused from earlier searches.
    /// </summary>
    public (long Total, long Reused, IReadOnlyList<TrialRecord> Items) Page(int offset, int limit)
    {
        using var connection = database.Open();
        using var count = connection.CreateCommand();
        count.CommandText = "SELECT COUNT(*), COUNT(reused_from) FROM trials WHERE search_id = @id;";
        count.With("@id", searchId);
        long total, reused;
        using (var counts = count.ExecuteReader())
        {
            counts.Read();
            (total, reused) = (counts.Long(0), counts.Long(1));
        }

        using var command = connection.CreateCommand();
        command.CommandText = $"SELECT {Columns} FROM trials WHERE search_id = @id ORDER BY {database.Dialect.InsertOrder} LIMIT @limit OFFSET @offset;";
        command.With("@id", searchId);
        command.With("@limit", limit);
        command.With("@offset", offset);
        var items = new List<TrialRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            items.Add(ReadTrial(reader));
        }

        return (total, reused, items);
    }

    private static TrialRecord ReadTrial(DbDataReader reader) => new(
        reader.GetString(0),
        reader.GetString(1),
        reader.IsDBNull(2) ? null : reader.GetString(2),
        reader.IsDBNull(3) ? null : reader.Int(3),
        reader.IsDBNull(4) ? null : reader.GetString(4),
        StoreJson.Read<MetricSet>(reader.GetString(5)),
        reader.GetDouble(6),
        reader.IsDBNull(7) ? null : StoreJson.Read<Dictionary<string, LayerSetting>>(reader.GetString(7)),
        reader.IsDBNull(8) ? null : WireNames.TryParse<ActivationCalibration>(reader.GetString(8), out var activations) ? activations : null,
        reader.IsDBNull(9) ? null : reader.GetString(9));
}
