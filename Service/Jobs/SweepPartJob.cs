using Bitbudget.Search;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;
using Hangfire;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// One part of a search's sweep (see <see cref="SweepParts"/>), run by whichever worker takes it. Safe to run
/// twice or after a crash: the part is held under a lease renewed by a heartbeat, each trial is keyed in the
/// store and saved once, and finishing a part counts it off exactly once. The run that finishes the last part
/// queues the search's job for the search stage.
/// </summary>
internal sealed partial class SweepPartJob(
    SweepPartStore parts,
    SearchStore searches,
    CatalogStore catalog,
    BlobStore blobs,
    Database database,
    ISearchEngine engine,
    SearchQueue queue,
    StoreProbe probe,
    IOptions<BitbudgetOptions> options,
    ILogger<SweepPartJob> logger)
{
    /// <summary>The name a worker's trials and parts are recorded under: the machine and the process.</summary>
    public static string Worker { get; } = $"{Environment.MachineName}:{Environment.ProcessId}";

    private TimeSpan Lease => TimeSpan.FromSeconds(options.Value.LeaseSeconds);

    [AutomaticRetry(Attempts = SearchJob.MaxAttempts - 1, DelaysInSeconds = [5, 30], OnAttemptsExceeded = AttemptsExceededAction.Fail)]
    public async Task RunAsync(string searchId, int part, CancellationToken cancellationToken)
    {
        using var scope = logger.BeginScope(new Dictionary<string, object> { ["SearchId"] = searchId });
        var owner = $"{Worker}/{Guid.NewGuid():N}";
        if (parts.TryClaim(searchId, part, owner, Lease) != ClaimOutcome.Claimed)
        {
            LogNothingToDo(logger, searchId, part);
            return;
        }

        var record = parts.List(searchId).Single(p => p.Part == part);
        using var run = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
        await using var heartbeat = new Timer(_ => Renew(searchId, part, owner, run), null, TimeSpan.Zero, Lease / 4);
        try
        {
            var search = searches.Find(searchId)!;
            var model = catalog.FindModel(search.ModelId)!;
            var dataset = catalog.FindDataset(search.DatasetId)!;
            var modelBytes = blobs.Read(model.Summary.Sha256);
            var datasetBytes = blobs.Read(dataset.Summary.Sha256);
            var settings = SearchVocabulary.ToSettings(search.Spec);
            var trials = new TrialStore(database, searchId, measuredBy: Worker);
            LogStarted(logger, searchId, part, record.Layers.Count, record.Trials);
            await Task.Factory.StartNew(
                () => engine.SweepLayers(modelBytes, model.Summary.Name, datasetBytes, settings, record.Layers, trials, run.Token),
                CancellationToken.None,
                TaskCreationOptions.LongRunning,
                TaskScheduler.Default).ConfigureAwait(false);
            run.Token.ThrowIfCancellationRequested();
            Finish(searchId, part);
        }
        catch (OperationCanceledException) when (run.IsCancellationRequested)
        {
            if (searches.Find(searchId) is { } current && SearchStates.IsFinal(current.State))
            {
                return;
            }

            parts.Release(searchId, part, owner);
            throw;
        }
        catch (Exception e) when (e is not EngineException && (StorageFault.Is(e) || (e is IOException && probe.Probe() is not null)))
        {
            TryRelease(searchId, part, owner);
            throw;
        }
        catch (Exception e) when (e is EngineException { Retryable: false } || record.Attempts >= SearchJob.MaxAttempts)
        {
            // The search's own job measures whatever a part left unmeasured, and fails the search with the
            // engine's error if it comes again: a part never fails a search by itself.
            LogHandedOver(logger, e, searchId, part);
            Finish(searchId, part);
        }
        catch (Exception)
        {
            parts.Release(searchId, part, owner);
            throw;
        }
    }

    private void Finish(string searchId, int part)
    {
        var left = parts.Finish(searchId, part, Worker);
        LogFinished(logger, searchId, part, left ?? -1);
        if (left == 0)
        {
            var jobId = queue.Enqueue(searchId);
            searches.SetJobId(searchId, jobId);
            LogLastPart(logger, searchId, jobId);
        }
    }

    private void Renew(string searchId, int part, string owner, CancellationTokenSource run)
    {
        try
        {
            if (!parts.Renew(searchId, part, owner, Lease))
            {
                run.Cancel();
            }
        }
        catch (Exception e) when (e is System.Data.Common.DbException or ObjectDisposedException or InvalidOperationException)
        {
            LogRenewFailed(logger, e, searchId, part);
        }
    }

    private void TryRelease(string searchId, int part, string owner)
    {
        try
        {
            parts.Release(searchId, part, owner);
        }
        catch (Exception e) when (StorageFault.Is(e))
        {
            LogRenewFailed(logger, e, searchId, part);
        }
    }

    [LoggerMessage(EventId = 3210, Level = LogLevel.Information, Message = "Search {SearchId}: part {Part} started ({Layers} layers, {Trials} trials)")]
    private static partial void LogStarted(ILogger logger, string searchId, int part, int layers, int trials);

    [LoggerMessage(EventId = 3211, Level = LogLevel.Information, Message = "Search {SearchId}: part {Part} done; {Left} parts left")]
    private static partial void LogFinished(ILogger logger, string searchId, int part, int left);

    [LoggerMessage(EventId = 3212, Level = LogLevel.Information, Message = "Search {SearchId}: every sweep part is done; queued the search stage as job {JobId}")]
    private static partial void LogLastPart(ILogger logger, string searchId, string jobId);

    [LoggerMessage(EventId = 3213, Level = LogLevel.Information, Message = "Search {SearchId}: part {Part} is done, held by a live run, or its search is over; nothing to do")]
    private static partial void LogNothingToDo(ILogger logger, string searchId, int part);

    [LoggerMessage(EventId = 3214, Level = LogLevel.Warning, Message = "Search {SearchId}: part {Part} failed; its unmeasured trials are left to the search's own job")]
    private static partial void LogHandedOver(ILogger logger, Exception exception, string searchId, int part);

    [LoggerMessage(EventId = 3215, Level = LogLevel.Warning, Message = "Search {SearchId}: could not renew part {Part}'s lease")]
    private static partial void LogRenewFailed(ILogger logger, Exception exception, string searchId, int part);
}
