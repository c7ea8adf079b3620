using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// Re-queues searches that nothing will run any more: queued or running searches whose Hangfire job is
/// gone (lost queue, expired job, crash between store and queue), and running searches whose job is still
/// marked processing while no run holds them: the lease lapsed (live runs renew it every few seconds, so the
/// worker died) or was given up by a run that then could not tell the queue (a failed attempt during a
/// disk-full blip leaves its job "processing" with nobody behind it). A search whose sweep is in parts is
/// left to its parts while any is pending; parts whose worker died are queued again instead.
/// </summary>
internal sealed partial class SearchRecovery(SearchStore searches, SearchQueue queue, SearchCancellations local, SweepPartStore parts, SweepParts sweepParts, ILogger<SearchRecovery> logger)
{
    /// <returns>How many searches (or parts of searches) were re-queued.</returns>
    public int Run()
    {
        var pending = parts.ListPending();
        var requeued = sweepParts.Resume(pending);
        var inParts = pending.Select(p => p.SearchId).ToHashSet(StringComparer.Ordinal);
        var now = DateTimeOffset.UtcNow;
        foreach (var search in searches.ListUnfinished().Where(s => !inParts.Contains(s.Id)))
        {
            var orphaned = search.JobId is not null
                && search.State == SearchStates.Running
                && (search.LeaseUntil is not { } until || until < now)
                && !local.IsRunningHere(search.Id)
                && queue.IsProcessing(search.JobId);
            if (search.JobId is not null && queue.IsAlive(search.JobId) && !orphaned)
            {
                continue;
            }

            var jobId = queue.Enqueue(search.Id);
            searches.SetJobId(search.Id, jobId);
            LogRequeued(logger, search.Id, search.State, jobId);
            requeued++;
        }

        return requeued;
    }

    [LoggerMessage(EventId = 3100, Level = LogLevel.Warning, Message = "Search {SearchId} was {State} but nothing was running it; queued it again as job {JobId}")]
    private static partial void LogRequeued(ILogger logger, string searchId, string state, string jobId);
}
