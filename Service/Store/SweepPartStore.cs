using System.Data.Common;
using Bitbudget.Service.Engine;

namespace Bitbudget.Service.Store;

/// <summary>
/// The parts a search's sweep is split into, so several workers can share one search. A part is taken under a
/// lease like a search is; finishing a part and counting down the search's <c>parts_left</c> is one transaction,
/// and the count-down is a single-row UPDATE that the database serialises, so exactly one worker sees it reach
/// zero and queues the final stage, however many finish at once.
/// </summary>
internal sealed class SweepPartStore(Database database)
{
    private const string Columns = "search_id, part, layers_json, trials, state, job_id, lease_owner, lease_until, attempts, finished_by";

    /// <summary>Stores the parts of a search's sweep, unless it already has parts (a second dispatch stores nothing).</summary>
    /// <returns>True when this call stored them.</returns>
    public bool Create(string searchId, IReadOnlyList<IReadOnlyList<LayerTrials>> parts)
    {
        using var connection = database.Open();
        using var transaction = connection.BeginTransaction();
        using (var claim = connection.Command(
            "UPDATE searches SET parts_left = @count, progress_total = @total WHERE id = @id AND parts_left IS NULL;", transaction)
            .With("@id", searchId)
            .With("@count", parts.Count)
            .With("@total", parts.Sum(p => p.Sum(l => l.Trials))))
        {
            if (claim.ExecuteNonQuery() != 1)
            {
                return false;
            }
        }

        for (var i = 0; i < parts.Count; i++)
        {
            using var insert = connection.Command(
                "INSERT INTO sweep_parts (search_id, part, layers_json, trials) VALUES (@id, @part, @layers, @trials);", transaction)
                .With("@id", searchId)
                .With("@part", i)
                .With("@layers", StoreJson.Write(parts[i].Select(l => l.Layer).ToList()))
                .With("@trials", parts[i].Sum(l => l.Trials));
            insert.ExecuteNonQuery();
        }

        transaction.Commit();
        return true;
    }

    public IReadOnlyList<SweepPartRecord> List(string searchId)
    {
        using var connection = database.Open();
        using var command = connection.Command($"SELECT {Columns} FROM sweep_parts WHERE search_id = @id ORDER BY part;").With("@id", searchId);
        return Read(command);
    }

    /// <summary>Parts not yet done of searches that are still running, for recovery.</summary>
    public IReadOnlyList<SweepPartRecord> ListPending()
    {
        using var connection = database.Open();
        using var command = connection.Command($"""
            SELECT {Columns} FROM sweep_parts
            WHERE state = 'pending' AND search_id IN (SELECT id FROM searches WHERE state = 'running')
            ORDER BY search_id, part;
            """);
        return Read(command);
    }

    /// <summary>
    /// Records the job that will run a part, clearing a lapsed lease so the part is not queued again while that job
    /// waits; nothing changes when a live run took the part meanwhile (the extra job then finds it held or done).
    /// </summary>
    public void SetJob(string searchId, int part, string jobId)
    {
        var now = Clock.Format(DateTimeOffset.UtcNow);
        using var connection = database.Open();
        using var command = connection.Command("""
            UPDATE sweep_parts SET job_id = @job, lease_owner = NULL, lease_until = NULL
            WHERE search_id = @id AND part = @part AND state = 'pending'
              AND (lease_owner IS NULL OR lease_until IS NULL OR lease_until < @now);
            """).With("@id", searchId).With("@part", part).With("@job", jobId).With("@now", now);
        command.ExecuteNonQuery();
    }

    /// <summary>Takes a part for one run: it must be pending, its search running, and any other run's lease lapsed.</summary>
    public ClaimOutcome TryClaim(string searchId, int part, string owner, TimeSpan lease)
    {
        var now = DateTimeOffset.UtcNow;
        using var connection = database.Open();
        using var command = connection.Command("""
            UPDATE sweep_parts SET lease_owner = @owner, lease_until = @until, attempts = attempts + 1
            WHERE search_id = @id AND part = @part AND state = 'pending'
              AND (lease_owner IS NULL OR lease_owner = @owner OR lease_until IS NULL OR lease_until < @now)
              AND EXISTS (SELECT 1 FROM searches WHERE id = @id AND state = 'running');
            """)
            .With("@id", searchId).With("@part", part).With("@owner", owner)
            .With("@until", Clock.Format(now + lease)).With("@now", Clock.Format(now));
        if (command.ExecuteNonQuery() == 1)
        {
            return ClaimOutcome.Claimed;
        }

        var current = List(searchId).FirstOrDefault(p => p.Part == part);
        return current is null || current.Done ? ClaimOutcome.Final : ClaimOutcome.Held;
    }

    /// <summary>
    /// Extends the part's lease, and the search's (so recovery leaves a search alone while its parts are worked
    /// on), with the sweep's progress counted from the stored trials.
    /// </summary>
    /// <returns>False when this run no longer holds the part or the search is no longer running (canceled).</returns>
    public bool Renew(string searchId, int part, string owner, TimeSpan lease)
    {
        var until = Clock.Format(DateTimeOffset.UtcNow + lease);
        using var connection = database.Open();
        using var transaction = connection.BeginTransaction();
        using var renew = connection.Command("""
            UPDATE sweep_parts SET lease_until = @until
            WHERE search_id = @id AND part = @part AND state = 'pending' AND lease_owner = @owner
              AND EXISTS (SELECT 1 FROM searches WHERE id = @id AND state = 'running');
            """, transaction)
            .With("@id", searchId).With("@part", part).With("@owner", owner).With("@until", until);
        if (renew.ExecuteNonQuery() != 1)
        {
            return false;
        }

        using var search = connection.Command("""
            UPDATE searches SET stage = 'sweep', eta_seconds = NULL, lease_until = @until,
                progress_done = (SELECT COUNT(*) FROM trials WHERE search_id = @id AND kind = 'sensitivity')
            WHERE id = @id AND state = 'running' AND lease_owner IS NULL;
            """, transaction)
            .With("@id", searchId).With("@until", until);
        search.ExecuteNonQuery();
        transaction.Commit();
        return true;
    }

    /// <summary>Gives a part up so another run can take it at once (shutdown, a failed attempt).</summary>
    public void Release(string searchId, int part, string owner)
    {
        using var connection = database.Open();
        using var command = connection.Command("""
            UPDATE sweep_parts SET lease_owner = NULL, lease_until = NULL
            WHERE search_id = @id AND part = @part AND state = 'pending' AND lease_owner = @owner;
            """).With("@id", searchId).With("@part", part).With("@owner", owner);
        command.ExecuteNonQuery();
    }

    /// <summary>Marks a part done (whoever holds it: its trials are stored either way) and counts it off its search.</summary>
    /// <returns>The parts still left, or null when the part was done already (a second finish counts nothing).</returns>
    public int? Finish(string searchId, int part, string worker)
    {
        using var connection = database.Open();
        using var transaction = connection.BeginTransaction();
        using (var finish = connection.Command("""
            UPDATE sweep_parts SET state = 'done', lease_owner = NULL, lease_until = NULL, finished_by = @worker, finished_at = @now
            WHERE search_id = @id AND part = @part AND state = 'pending';
            """, transaction)
            .With("@id", searchId).With("@part", part).With("@worker", worker).With("@now", Clock.Format(DateTimeOffset.UtcNow)))
        {
            if (finish.ExecuteNonQuery() != 1)
            {
                return null;
            }
        }

        using var count = connection.Command("UPDATE searches SET parts_left = parts_left - 1 WHERE id = @id RETURNING parts_left;", transaction)
            .With("@id", searchId);
        var left = (int)count.ScalarLong();
        transaction.Commit();
        return left;
    }

    private static List<SweepPartRecord> Read(DbCommand command)
    {
        var parts = new List<SweepPartRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            parts.Add(new SweepPartRecord(
                reader.GetString(0),
                reader.Int(1),
                StoreJson.Read<List<string>>(reader.GetString(2)),
                reader.Int(3),
                reader.GetString(4) == "done",
                reader.StringOrNull(5),
                reader.StringOrNull(6),
                Clock.ParseOrNull(reader.StringOrNull(7)),
                reader.Int(8),
                reader.StringOrNull(9)));
        }

        return parts;
    }
}
