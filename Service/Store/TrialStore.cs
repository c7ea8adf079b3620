using System.Data.Common;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Store;

/// <summary>
/// The engine's <see cref="ITrialStore"/> over the trials table, for one search. A key is stored at most
/// once (UNIQUE(search_id, key) with ON CONFLICT DO NOTHING), so a rerun or a second concurrent run of the
/// same search cannot duplicate a trial. Given <paramref name="reuseFrom"/> (earlier searches with the same
/// <see cref="TrialContext"/>), their sensitivity trials are read as this search's own, so it does not sweep
/// again; they are not copied, so this search's trial list (<see cref="Page"/>) holds only what it measured.
/// </summary>
/// <param name="measuredBy">The worker that measures through this store (kept with each trial it saves), or null.</param>
internal sealed class TrialStore(Database database, string searchId, IReadOnlyList<string>? reuseFrom = null, string? measuredBy = null) : ITrialStore
{
    public IReadOnlyDictionary<string, TrialRecord> LoadAll()
    {
        var trials = LoadOwn();
        if (reuseFrom is { Count: > 0 })
        {
            foreach (var trial in LoadReusable(reuseFrom))
            {
                trials.TryAdd(trial.Key, trial);
            }
        }

        return trials;
    }

    private Dictionary<string, TrialRecord> LoadOwn()
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = $"""
            SELECT key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, assignment_json, activations
            FROM trials WHERE search_id = @id ORDER BY {database.Dialect.InsertOrder};
            """;
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

    /// <summary>The sensitivity trials of <paramref name="searchIds"/>, the earliest stored first for each key.</summary>
    private List<TrialRecord> LoadReusable(IReadOnlyList<string> searchIds)
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        var names = searchIds.Select((_, i) => $"@s{i}").ToList();
        command.CommandText = $"""
            SELECT key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, assignment_json, activations
            FROM trials WHERE kind = 'sensitivity' AND search_id IN ({string.Join(", ", names)}) ORDER BY {database.Dialect.InsertOrder};
            """;
        for (var i = 0; i < names.Count; i++)
        {
            command.With(names[i], searchIds[i]);
        }

        var trials = new List<TrialRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            trials.Add(ReadTrial(reader));
        }

        return trials;
    }

    /// <summary>How many trials each worker measured for this search (trials saved without a worker name are left out).</summary>
    public IReadOnlyDictionary<string, int> CountByWorker()
    {
        using var connection = database.Open();
        using var command = connection.Command("SELECT measured_by, COUNT(*) FROM trials WHERE search_id = @id AND measured_by IS NOT NULL GROUP BY measured_by;")
            .With("@id", searchId);
        var counts = new Dictionary<string, int>(StringComparer.Ordinal);
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            counts[reader.GetString(0)] = reader.Int(1);
        }

        return counts;
    }

    /// <summary>One page of trials in the order they were stored, and how many there are in all.</summary>
    public (long Total, IReadOnlyList<TrialRecord> Items) Page(int offset, int limit)
    {
        using var connection = database.Open();
        using var count = connection.CreateCommand();
        count.CommandText = "SELECT COUNT(*) FROM trials WHERE search_id = @id;";
        count.With("@id", searchId);
        var total = Convert.ToInt64(count.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture);

        using var command = connection.CreateCommand();
        command.CommandText = $"""
            SELECT key, kind, layer, bits, assignment_hash, metrics_json, duration_ms, assignment_json, activations
            FROM trials WHERE search_id = @id ORDER BY {database.Dialect.InsertOrder} LIMIT @limit OFFSET @offset;
            """;
        command.With("@id", searchId);
        command.With("@limit", limit);
        command.With("@offset", offset);
        var items = new List<TrialRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            items.Add(ReadTrial(reader));
        }

        return (total, items);
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
        reader.IsDBNull(8) ? null : WireNames.TryParse<ActivationCalibration>(reader.GetString(8), out var activations) ? activations : null);
}
