using Bitbudget.Service.Store;

namespace Bitbudget.Service.Jobs;

/// <summary>At start, re-queues queued or running searches whose Hangfire job is gone (lost queue, expired job, crash between store and queue).</summary>
internal sealed partial class SearchRecovery(SearchStore searches, SearchQueue queue, ILogger<SearchRecovery> logger)
{
    /// <returns>How many searches were re-queued.</returns>
    public int Run()
    {
        var requeued = 0;
        foreach (var search in searches.ListUnfinished())
        {
            if (search.JobId is not null && queue.IsAlive(search.JobId))
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

    [LoggerMessage(EventId = 3100, Level = LogLevel.Warning, Message = "Search {SearchId} was {State} but its job was gone; queued it again as job {JobId}")]
    private static partial void LogRequeued(ILogger logger, string searchId, string state, string jobId);
}
