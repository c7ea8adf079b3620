using Bitbudget.Service.Searches;
using System.Data.Common;

namespace Bitbudget.Service.Store;

/// <summary>
/// Searches and their results. Every state change is one conditional UPDATE, so concurrent runs of the
/// same search (a job fetched twice, a restart) cannot both finish it: only the lease holder of a
/// running search can complete or fail it, and a canceled search stays canceled.
/// </summary>
internal sealed class SearchStore(Database database)
{
    /// <summary>How long a released search is left to its queued retry before recovery may queue it again.</summary>
    public static readonly TimeSpan ReleaseGrace = TimeSpan.FromSeconds(10);

    private const string Columns = """
        id, model_id, dataset_id, settings_json, state, stage, progress_done, progress_total, eta_seconds,
        error_code, error_message, job_id, attempts, idempotency_key, request_hash, created_at, started_at, finished_at, lease_until, failures
        """;

    /// <summary>Adds a queued search, or returns the one already stored under the same idempotency key.</summary>
    /// <returns>The stored search and whether this call created it.</returns>
    public (SearchRecord Search, bool Created) Create(string modelId, string datasetId, SearchSpec spec, string? idempotencyKey, string requestHash)
    {
        using var connection = database.Open();
        using var transaction = connection.BeginTransaction();
        if (idempotencyKey is not null && Query(connection, transaction, "WHERE idempotency_key = @p", idempotencyKey).SingleOrDefault() is { } existing)
        {
            return (existing, false);
        }

        var id = Ids.New("srch");
        using (var insert = connection.CreateCommand())
        {
            insert.Transaction = transaction;
            insert.CommandText = """
                INSERT INTO searches (id, model_id, dataset_id, settings_json, state, idempotency_key, request_hash, created_at)
                VALUES (@id, @model, @dataset, @spec, 'queued', @key, @hash, @at);
                """;
            insert.With("@id", id);
            insert.With("@model", modelId);
            insert.With("@dataset", datasetId);
            insert.With("@spec", StoreJson.Write(spec));
            insert.With("@key", (object?)idempotencyKey ?? DBNull.Value);
            insert.With("@hash", requestHash);
            insert.With("@at", Clock.Format(DateTimeOffset.UtcNow));
            insert.ExecuteNonQuery();
        }

        var created = Query(connection, transaction, "WHERE id = @p", id).Single();
        transaction.Commit();
        return (created, true);
    }

    public SearchRecord? Find(string id)
    {
        using var connection = database.Open();
        return Query(connection, null, "WHERE id = @p", id).SingleOrDefault();
    }

    public SearchRecord? FindByIdempotencyKey(string key)
    {
        using var connection = database.Open();
        return Query(connection, null, "WHERE idempotency_key = @p", key).SingleOrDefault();
    }

    /// <summary>Searches, newest first, optionally for one model.</summary>
    public IReadOnlyList<SearchRecord> List(string? modelId, int limit)
    {
        using var connection = database.Open();
        var where = modelId is null ? "" : "WHERE model_id = @p";
        return Query(connection, null, $"{where} ORDER BY created_at DESC, {database.Dialect.InsertOrder} DESC LIMIT {limit}", modelId);
    }

    /// <summary>Searches of every model version uploaded under one name, newest first.</summary>
    public IReadOnlyList<SearchRecord> ListForModelName(string modelName, int limit)
    {
        using var connection = database.Open();
        return Query(connection, null, $"WHERE model_id IN (SELECT id FROM models WHERE name = @p) ORDER BY created_at DESC, {database.Dialect.InsertOrder} DESC LIMIT {limit}", modelName);
    }

    /// <summary>
    /// Every search on this model and this dataset, in any state, oldest first: the candidates whose sensitivity
    /// trials a new search may reuse (see <see cref="Bitbudget.Search.Planning.TrialContext"/>). Models and
    /// datasets are stored once per content hash, so equal ids mean equal bytes.
    /// </summary>
    public IReadOnlyList<SearchRecord> ListOnSameInputs(string modelId, string datasetId)
    {
        using var connection = database.Open();
        return Query(connection, null, $"WHERE model_id = @p AND dataset_id = @q ORDER BY created_at, {database.Dialect.InsertOrder}", modelId, datasetId);
    }

    /// <summary>Searches that are queued or running, for re-enqueueing at start.</summary>
    public IReadOnlyList<SearchRecord> ListUnfinished()
    {
        using var connection = database.Open();
        return Query(connection, null, "WHERE state IN ('queued', 'running') ORDER BY created_at", null);
    }

    public void SetJobId(string id, string jobId) =>
        Execute("UPDATE searches SET job_id = @job WHERE id = @id;", ("@id", id), ("@job", jobId));

    /// <summary>Takes the search for one run: it must be queued or running, and any other run's lease must have expired.</summary>
    public ClaimOutcome TryClaim(string id, string owner, TimeSpan lease)
    {
        var now = DateTimeOffset.UtcNow;
        var changed = Execute(
            """
            UPDATE searches
            SET state = 'running', lease_owner = @owner, lease_until = @until, attempts = attempts + 1,
                started_at = COALESCE(started_at, @now), error_code = NULL, error_message = NULL
            WHERE id = @id AND state IN ('queued', 'running')
              AND (lease_owner IS NULL OR lease_owner = @owner OR lease_until IS NULL OR lease_until < @now);
            """,
            ("@id", id),
            ("@owner", owner),
            ("@until", Clock.Format(now + lease)),
            ("@now", Clock.Format(now)));
        if (changed == 1)
        {
            return ClaimOutcome.Claimed;
        }

        var current = Find(id);
        return current is null || SearchStates.IsFinal(current.State) ? ClaimOutcome.Final : ClaimOutcome.Held;
    }

    /// <summary>Records progress and extends the lease.</summary>
    /// <returns>False when this run no longer owns a running search (canceled, or the lease was lost).</returns>
    public bool Report(string id, string owner, TimeSpan lease, string stage, int done, int total, double? etaSeconds) =>
        Execute(
            """
            UPDATE searches
            SET stage = @stage, progress_done = @done, progress_total = @total, eta_seconds = @eta, lease_until = @until
            WHERE id = @id AND state = 'running' AND lease_owner = @owner;
            """,
            ("@id", id),
            ("@owner", owner),
            ("@stage", stage),
            ("@done", done),
            ("@total", total),
            ("@eta", etaSeconds),
            ("@until", Clock.Format(DateTimeOffset.UtcNow + lease))) == 1;

    /// <summary>Marks the search succeeded and stores its result, in one transaction, only for the lease holder.</summary>
    /// <returns>False when this run no longer owns the search; nothing is written then.</returns>
    public bool Complete(string owner, ResultRecord result)
    {
        var now = Clock.Format(DateTimeOffset.UtcNow);
        using var connection = database.Open();
        using var transaction = connection.BeginTransaction();
        using (var update = connection.CreateCommand())
        {
            update.Transaction = transaction;
            update.CommandText = """
                UPDATE searches
                SET state = 'succeeded', stage = 'export', progress_done = progress_total, eta_seconds = 0,
                    finished_at = @now, lease_owner = NULL, lease_until = NULL
                WHERE id = @id AND state = 'running' AND lease_owner = @owner;
                """;
            update.With("@id", result.SearchId);
            update.With("@owner", owner);
            update.With("@now", now);
            if (update.ExecuteNonQuery() != 1)
            {
                return false;
            }
        }

        using (var insert = connection.CreateCommand())
        {
            insert.Transaction = transaction;
            insert.CommandText = """
                INSERT INTO results (search_id, feasible, message, manifest_sha256, model_sha256, sensitivity_sha256,
                    frontier_sha256, bytes, average_bits, compression, predicted, measured, trial_count, warnings_json, created_at,
                    held_out_samples, held_out_measured, held_out_meets, model_file_bytes, storage, storage_note)
                VALUES (@id, @feasible, @message, @manifest, @model, @csv, @frontier, @bytes, @bits, @compression,
                    @predicted, @measured, @trials, @warnings, @now, @heldSamples, @heldMeasured, @heldMeets, @fileBytes, @storage, @storageNote)
                ON CONFLICT(search_id) DO NOTHING;
                """;
            insert.With("@id", result.SearchId);
            insert.With("@feasible", result.Feasible ? 1 : 0);
            insert.With("@message", result.Message);
            insert.With("@manifest", result.ManifestSha256);
            insert.With("@model", (object?)result.ModelSha256 ?? DBNull.Value);
            insert.With("@csv", result.SensitivitySha256);
            insert.With("@frontier", result.FrontierSha256);
            insert.With("@bytes", (object?)result.Bytes ?? DBNull.Value);
            insert.With("@bits", Real(result.AverageBits));
            insert.With("@compression", Real(result.Compression));
            insert.With("@predicted", Real(result.Predicted));
            insert.With("@measured", Real(result.Measured));
            insert.With("@trials", result.TrialCount);
            insert.With("@warnings", (object?)result.WarningsJson ?? DBNull.Value);
            insert.With("@fileBytes", (object?)result.ModelFileBytes ?? DBNull.Value);
            insert.With("@storage", result.Storage);
            insert.With("@storageNote", (object?)result.StorageNote ?? DBNull.Value);
            insert.With("@now", now);
            insert.With("@heldSamples", (object?)result.HeldOutSamples ?? DBNull.Value);
            insert.With("@heldMeasured", (object?)result.HeldOutMeasured ?? DBNull.Value);
            insert.With("@heldMeets", result.HeldOutMeetsBudget is { } meets ? (meets ? 1 : 0) : DBNull.Value);
            insert.ExecuteNonQuery();
        }

        transaction.Commit();
        return true;
    }

    /// <summary>Ends a running search as failed (lease holder only).</summary>
    public bool Fail(string id, string owner, string code, string message) =>
        Execute(
            """
            UPDATE searches
            SET state = 'failed', error_code = @code, error_message = @message, finished_at = @now,
                eta_seconds = NULL, lease_owner = NULL, lease_until = NULL, failures = failures + 1
            WHERE id = @id AND state = 'running' AND lease_owner = @owner;
            """,
            ("@id", id),
            ("@owner", owner),
            ("@code", code),
            ("@message", message),
            ("@now", Clock.Format(DateTimeOffset.UtcNow))) == 1;

    /// <summary>
    /// Gives the lease up so another run can take over at once: after a shutdown or a storage fault (which
    /// are not the search's fault, <paramref name="failed"/> false), or after an error of the search that
    /// it will be retried from (<paramref name="failed"/> true counts it against the retry budget).
    /// </summary>
    /// <remarks>
    /// Any run may claim a released search at once (no owner), but <c>lease_until</c> stays a few seconds
    /// ahead: that is the time the queue takes to record the retry, during which recovery must not see the
    /// search as abandoned and queue it a second time.
    /// </remarks>
    public void Release(string id, string owner, string? errorCode = null, string? errorMessage = null, bool failed = false) =>
        Execute(
            """
            UPDATE searches SET lease_owner = NULL, lease_until = @until, error_code = @code, error_message = @message,
                failures = failures + @failed
            WHERE id = @id AND state = 'running' AND lease_owner = @owner;
            """,
            ("@id", id),
            ("@owner", owner),
            ("@until", Clock.Format(DateTimeOffset.UtcNow + ReleaseGrace)),
            ("@code", errorCode),
            ("@message", errorMessage),
            ("@failed", failed ? 1 : 0));

    /// <summary>Cancels a queued or running search.</summary>
    /// <returns>False when the search had already finished.</returns>
    public bool Cancel(string id) =>
        Execute(
            """
            UPDATE searches
            SET state = 'canceled', finished_at = @now, eta_seconds = NULL, lease_owner = NULL, lease_until = NULL
            WHERE id = @id AND state IN ('queued', 'running');
            """,
            ("@id", id),
            ("@now", Clock.Format(DateTimeOffset.UtcNow))) == 1;

    public ResultRecord? FindResult(string searchId)
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = """
            SELECT search_id, feasible, message, manifest_sha256, model_sha256, sensitivity_sha256, frontier_sha256,
                bytes, average_bits, compression, predicted, measured, trial_count, warnings_json,
                held_out_samples, held_out_measured, held_out_meets, model_file_bytes, storage, storage_note
            FROM results WHERE search_id = @id;
            """;
        command.With("@id", searchId);
        using var reader = command.ExecuteReader();
        if (!reader.Read())
        {
            return null;
        }

        return new ResultRecord(
            reader.GetString(0),
            reader.Long(1) != 0,
            reader.GetString(2),
            reader.GetString(3),
            reader.IsDBNull(4) ? null : reader.GetString(4),
            reader.GetString(5),
            reader.GetString(6),
            reader.IsDBNull(7) ? null : reader.Long(7),
            reader.IsDBNull(8) ? null : reader.GetDouble(8),
            reader.IsDBNull(9) ? null : reader.GetDouble(9),
            reader.IsDBNull(10) ? null : reader.GetDouble(10),
            reader.IsDBNull(11) ? null : reader.GetDouble(11),
            reader.Int(12),
            reader.IsDBNull(13) ? null : reader.GetString(13),
            reader.IsDBNull(14) ? null : reader.Int(14),
            reader.IsDBNull(15) ? null : reader.GetDouble(15),
            reader.IsDBNull(16) ? null : reader.Long(16) != 0,
            reader.IsDBNull(17) ? null : reader.Long(17),
            reader.GetString(18),
            reader.IsDBNull(19) ? null : reader.GetString(19));
    }

    public int CountResults(string searchId)
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = "SELECT COUNT(*) FROM results WHERE search_id = @id;";
        command.With("@id", searchId);
        return Convert.ToInt32(command.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture);
    }

    /// <summary>How many searches are in each state (every state listed, zero included), from the counters the triggers keep.</summary>
    public IReadOnlyDictionary<string, long> CountByState()
    {
        var counts = SearchStates.All.ToDictionary(s => s, _ => 0L, StringComparer.Ordinal);
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        // Kept by triggers as searches change state (migration 2): a scrape reads a few rows, never the table.
        command.CommandText = "SELECT state, count FROM search_counts;";
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            counts[reader.GetString(0)] = reader.Long(1);
        }

        return counts;
    }

    /// <summary>SQLite keeps infinities in a REAL column but refuses NaN ("no number"), which is stored as NULL (on PostgreSQL too, so both stores read alike).</summary>
    private static object Real(double? value) => value is { } v && !double.IsNaN(v) ? v : DBNull.Value;

    private int Execute(string sql, params (string Name, object? Value)[] parameters)
    {
        using var connection = database.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        foreach (var (name, value) in parameters)
        {
            command.With(name, value);
        }

        return command.ExecuteNonQuery();
    }

    private static List<SearchRecord> Query(DbConnection connection, DbTransaction? transaction, string tail, string? parameter, string? second = null)
    {
        using var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = $"SELECT {Columns} FROM searches {tail};";
        if (parameter is not null)
        {
            command.With("@p", parameter);
        }

        if (second is not null)
        {
            command.With("@q", second);
        }

        var list = new List<SearchRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            list.Add(new SearchRecord(
                reader.GetString(0),
                reader.GetString(1),
                reader.GetString(2),
                StoreJson.Read<SearchSpec>(reader.GetString(3)),
                reader.GetString(4),
                reader.IsDBNull(5) ? null : reader.GetString(5),
                reader.Int(6),
                reader.Int(7),
                reader.IsDBNull(8) ? null : reader.GetDouble(8),
                reader.IsDBNull(9) ? null : reader.GetString(9),
                reader.IsDBNull(10) ? null : reader.GetString(10),
                reader.IsDBNull(11) ? null : reader.GetString(11),
                reader.Int(12),
                reader.IsDBNull(13) ? null : reader.GetString(13),
                reader.GetString(14),
                Clock.Parse(reader.GetString(15)),
                Clock.ParseOrNull(reader.IsDBNull(16) ? null : reader.GetString(16)),
                Clock.ParseOrNull(reader.IsDBNull(17) ? null : reader.GetString(17)),
                Clock.ParseOrNull(reader.IsDBNull(18) ? null : reader.GetString(18)),
                reader.Int(19)));
        }

        return list;
    }
}
