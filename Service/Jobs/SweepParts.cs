using Bitbudget.Search.Planning;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Store;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// Spreads one search over many workers: the search's job splits the sensitivity sweep into parts (groups of
/// whole layers, <c>Bitbudget:SweepParts</c>), queues one job per part for any worker to take, and gives the
/// search up; the worker that finishes the last part queues the search's job again, which then finds every
/// sweep trial stored and goes on to the search stage. A part whose worker died is queued again once its lease
/// lapses (<see cref="Resume"/>, from the recovery loop).
/// </summary>
internal sealed partial class SweepParts(SweepPartStore parts, SearchQueue queue, ISearchEngine engine, IOptions<BitbudgetOptions> options, ILogger<SweepParts> logger)
{
    /// <summary>
    /// Hands the search's sweep to part jobs when it is split (or should be and is not yet). The caller, which
    /// holds the search, releases it and stops when this returns true, and runs the search itself when false:
    /// no split is configured, or every part is done.
    /// </summary>
    public bool Dispatch(string searchId, byte[] model, string modelName, SearchSettings settings)
    {
        var existing = parts.List(searchId);
        if (existing.Count == 0 && options.Value.SweepParts > 1)
        {
            var split = Split(engine.PlanSweep(model, modelName, settings), options.Value.SweepParts);
            if (split.Count > 1 && parts.Create(searchId, split))
            {
                LogSplit(logger, searchId, split.Count, split.Sum(p => p.Sum(l => l.Trials)));
            }

            existing = parts.List(searchId);
        }

        if (existing.Count == 0 || existing.All(p => p.Done))
        {
            return false;
        }

        Resume(existing);
        return true;
    }

    /// <summary>Queues a job for every pending part of a running search that nothing will run: none queued yet, its job gone, or its worker's lease lapsed.</summary>
    /// <returns>How many parts were queued.</returns>
    public int Resume(IReadOnlyList<SweepPartRecord>? pending = null)
    {
        var now = DateTimeOffset.UtcNow;
        var queued = 0;
        foreach (var part in pending ?? parts.ListPending())
        {
            var lapsed = part.LeaseOwner is not null && (part.LeaseUntil is not { } until || until < now);
            var orphaned = part.LeaseOwner is null && (part.JobId is null || !queue.IsAlive(part.JobId));
            if (part.Done || !(lapsed || orphaned))
            {
                continue;
            }

            var jobId = queue.EnqueuePart(part.SearchId, part.Part);
            parts.SetJob(part.SearchId, part.Part, jobId);
            if (lapsed)
            {
                LogLapsed(logger, part.SearchId, part.Part, part.LeaseOwner!, jobId);
            }

            queued++;
        }

        return queued;
    }

    /// <summary>
    /// Cuts the plan into at most <paramref name="count"/> runs of consecutive layers with about as many trials
    /// each (a layer is never split: its trials share cached activations).
    /// </summary>
    public static IReadOnlyList<IReadOnlyList<LayerTrials>> Split(IReadOnlyList<LayerTrials> plan, int count)
    {
        ArgumentNullException.ThrowIfNull(plan);
        var layers = plan.Where(l => l.Trials > 0).ToList();
        var total = layers.Sum(l => l.Trials);
        var groups = new List<IReadOnlyList<LayerTrials>>();
        var current = new List<LayerTrials>();
        var before = 0L;
        foreach (var layer in layers)
        {
            // The part a layer falls in is where the middle of its trials lies on the cumulative count.
            var group = (int)Math.Min(count - 1, ((before * 2) + layer.Trials) * count / (2L * total));
            if (group > groups.Count && current.Count > 0)
            {
                groups.Add(current);
                current = [];
            }

            current.Add(layer);
            before += layer.Trials;
        }

        if (current.Count > 0)
        {
            groups.Add(current);
        }

        return groups;
    }

    [LoggerMessage(EventId = 3200, Level = LogLevel.Information, Message = "Search {SearchId}: sweep split into {Parts} parts ({Trials} trials) for any worker to take")]
    private static partial void LogSplit(ILogger logger, string searchId, int parts, int trials);

    [LoggerMessage(EventId = 3201, Level = LogLevel.Warning, Message = "Search {SearchId}: part {Part}'s worker {Owner} let its lease lapse; queued it again as job {JobId}")]
    private static partial void LogLapsed(ILogger logger, string searchId, int part, string owner, string jobId);
}
