using Hangfire;
using Hangfire.States;

namespace Bitbudget.Service.Jobs;

/// <summary>Puts searches on the durable Hangfire queue and looks their jobs up.</summary>
internal sealed class SearchQueue(IBackgroundJobClient client, JobStorage storage)
{
    /// <returns>The Hangfire job id.</returns>
    public string Enqueue(string searchId) =>
        client.Enqueue<SearchJob>(job => job.RunAsync(searchId, CancellationToken.None));

    /// <summary>Queues one part of a search's sweep for any worker.</summary>
    /// <returns>The Hangfire job id.</returns>
    public string EnqueuePart(string searchId, int part) =>
        client.Enqueue<SweepPartJob>(job => job.RunAsync(searchId, part, CancellationToken.None));

    public void Delete(string jobId) => client.Delete(jobId);

    /// <summary>True while the job exists and can still run (enqueued, scheduled, processing, or waiting for a retry).</summary>
    public bool IsAlive(string jobId)
    {
        using var connection = storage.GetConnection();
        var state = connection.GetStateData(jobId)?.Name;
        return state == EnqueuedState.StateName || state == ScheduledState.StateName
            || state == ProcessingState.StateName || state == AwaitingState.StateName;
    }

    /// <summary>True when Hangfire counts the job as being processed by some worker.</summary>
    public bool IsProcessing(string jobId)
    {
        using var connection = storage.GetConnection();
        return connection.GetStateData(jobId)?.Name == ProcessingState.StateName;
    }

    /// <summary>Throws when the job storage cannot be read.</summary>
    public void Ping()
    {
        using var connection = storage.GetConnection();
        connection.GetStateData("0");
    }
}
