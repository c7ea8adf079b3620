using Bitbudget.Search;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;
using Bitbudget.Service.Hosting;
using Hangfire;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// One search, run as one Hangfire job. Safe to run twice or after a crash: trials are keyed in the store
/// (the engine skips stored ones), only the holder of the search's lease may finish it, and a second
/// concurrent run waits for the first and then finds the search finished.
/// </summary>
internal sealed partial class SearchJob(
    SearchStore searches,
    CatalogStore catalog,
    BlobStore blobs,
    Database database,
    ISearchEngine engine,
    SearchCancellations cancellations,
    StoreProbe probe,
    SweepParts sweepParts,
    IOptions<BitbudgetOptions> options,
    ILogger<SearchJob> logger)
{
    /// <summary>
    /// Runs of one search that may end in an unexpected error before the search is failed. Restarts after a
    /// crash or a shutdown and faults of the data folder are not the search's failures and do not count.
    /// </summary>
    public const int MaxAttempts = 3;


    /// <summary>How long a claim on a search lasts without a heartbeat; a crashed worker's search is free again after it.</summary>
    private TimeSpan Lease => TimeSpan.FromSeconds(options.Value.LeaseSeconds);

    /// <summary>Renewals come four times per lease, so one late heartbeat never loses a live run its claim.</summary>
    private TimeSpan HeartbeatInterval => Lease / 4;
    private static readonly TimeSpan ClaimPollInterval = TimeSpan.FromMilliseconds(250);

    [AutomaticRetry(Attempts = MaxAttempts - 1, DelaysInSeconds = [5, 30], OnAttemptsExceeded = AttemptsExceededAction.Fail)]
    public async Task RunAsync(string searchId, CancellationToken cancellationToken)
    {
        using var scope = logger.BeginScope(new Dictionary<string, object> { ["SearchId"] = searchId });
        var owner = $"{Environment.MachineName}/{Environment.ProcessId}/{Guid.NewGuid():N}";
        if (!await ClaimAsync(searchId, owner, cancellationToken).ConfigureAwait(false))
        {
            return;
        }

        using var run = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
        using var registration = cancellations.Register(searchId, run);
        var progress = new ProgressReporter(searches, searchId, owner, Lease, run);
        await using var heartbeat = new Timer(_ => Beat(progress), null, HeartbeatInterval, HeartbeatInterval);
        var search = searches.Find(searchId)!;
        try
        {
            LogStarted(logger, searchId, search.Attempts);
            var model = catalog.FindModel(search.ModelId)!;
            var dataset = catalog.FindDataset(search.DatasetId)!;
            var modelBytes = blobs.Read(model.Summary.Sha256);
            var datasetBytes = blobs.Read(dataset.Summary.Sha256);
            var holdoutBytes = search.Spec.HoldoutDatasetId is { } holdoutId ? blobs.Read(catalog.FindDataset(holdoutId)!.Summary.Sha256) : null;
            var settings = SearchVocabulary.ToSettings(search.Spec);
            var reuse = ReusableSearches(search, model.Summary.Sha256, dataset.Summary.Sha256, settings);
            if (reuse.Count > 0)
            {
                LogReusing(logger, searchId, reuse.Count, string.Join(", ", reuse));
            }

            // A sweep reused from earlier searches needs no workers; otherwise it may be spread over them.
            if (reuse.Count == 0 && sweepParts.Dispatch(searchId, modelBytes, model.Summary.Name, settings))
            {
                // Workers measure the parts; the one that finishes the last queues this job again.
                searches.Release(searchId, owner);
                LogDispatched(logger, searchId);
                return;
            }

            var trials = new TrialStore(database, searchId, reuse, SweepPartJob.Worker);

            // The engine is synchronous and CPU-bound for minutes: give it a thread of its own rather than a pool thread.
            var result = await Task.Factory.StartNew(
                () => engine.RunSearch(modelBytes, model.Summary.Name, datasetBytes, settings, trials, progress, run.Token, holdoutBytes),
                CancellationToken.None,
                TaskCreationOptions.LongRunning,
                TaskScheduler.Default).ConfigureAwait(false);
            run.Token.ThrowIfCancellationRequested();

            var record = new ResultRecord(
                searchId,
                result.Feasible,
                result.Message,
                blobs.Put(result.ManifestJson),
                result.QuantizedModel is null ? null : blobs.Put(result.QuantizedModel),
                blobs.Put(System.Text.Encoding.UTF8.GetBytes(result.SensitivityCsv)),
                blobs.Put(System.Text.Encoding.UTF8.GetBytes(result.FrontierJson)),
                // An infeasible search chose no assignment: it has no size and no error to report (the engine gives 0 and NaN).
                result.Feasible ? result.Bytes : null,
                result.Feasible ? result.AverageBits : null,
                result.Feasible ? result.Compression : null,
                result.Feasible ? result.PredictedError : null,
                result.Feasible ? result.MeasuredError : null,
                result.TrialCount,
                StoreJson.Write(result.Warnings ?? []),
                result.HeldOutSamples,
                result.HeldOutMeasured,
                result.HeldOutMeetsBudget,
                result.ModelFileBytes,
                result.Storage,
                result.StorageNote);
            if (result.SweepNote is { } sweep)
            {
                LogSweepPlan(logger, searchId, sweep);
            }

            if (searches.Complete(owner, record))
            {
                LogSucceeded(logger, searchId, result.Feasible, result.Message);
            }
            else
            {
                LogResultDiscarded(logger, searchId);
            }
        }
        catch (OperationCanceledException) when (run.IsCancellationRequested)
        {
            if (searches.Find(searchId)?.State == SearchStates.Canceled)
            {
                LogCanceled(logger, searchId);
                return;
            }

            // Shutdown: hand the search back at once so the requeued job (here or elsewhere) can go on.
            searches.Release(searchId, owner);
            LogInterrupted(logger, searchId);
            throw;
        }
        catch (EngineException e) when (!e.Retryable)
        {
            searches.Fail(searchId, owner, e.Code, e.Message);
            LogEngineRefused(logger, searchId, e.Code, e.Message);
        }
        catch (Exception e) when (IsStorageFault(e))
        {
            // The disk, not the search: hand it back uncounted. If even that write fails, the lease lapses and
            // the recovery loop queues the search again once the store can be written.
            TryRelease(searchId, owner);
            LogStorageFault(logger, e, searchId);
            throw;
        }
        catch (Exception e)
        {
            var code = e is EngineException engineError ? engineError.Code : "search-crashed";
            var failures = search.Failures + 1;
            if (failures >= MaxAttempts)
            {
                searches.Fail(searchId, owner, code, $"The search failed {failures} times; the last error was: {e.Message}");
            }
            else
            {
                searches.Release(searchId, owner, code, $"Run failed ({e.Message}); retrying: failure {failures} of the {MaxAttempts} allowed.", failed: true);
            }

            LogAttemptFailed(logger, e, searchId, failures, MaxAttempts);
            throw;
        }
    }

    /// <summary>
    /// Earlier searches on the same model and dataset whose settings give the same <see cref="TrialContext"/>: their
    /// sensitivity trials measured exactly what this search's would, so it reads them instead of sweeping again.
    /// </summary>
    private List<string> ReusableSearches(SearchRecord search, string modelSha256, string datasetSha256, SearchSettings settings)
    {
        var session = EngineAdapter.TrialOptions(options.Value);
        var context = TrialContext.Of(modelSha256, datasetSha256, settings, session);
        var reusable = new List<string>();
        foreach (var earlier in searches.ListOnSameInputs(search.ModelId, search.DatasetId))
        {
            if (earlier.Id != search.Id && TrialContext.Of(modelSha256, datasetSha256, SearchVocabulary.ToSettings(earlier.Spec), session) == context)
            {
                reusable.Add(earlier.Id);
            }
        }

        return reusable;
    }

    /// <summary>A fault of the data folder: SQLite's disk-full or read-only codes, or an I/O error the store probe confirms.</summary>
    private bool IsStorageFault(Exception e) =>
        e is not EngineException && (StorageFault.Is(e) || (e is IOException && probe.Probe() is not null));

    private void TryRelease(string searchId, string owner)
    {
        try
        {
            searches.Release(searchId, owner);
        }
        catch (Exception e) when (StorageFault.Is(e))
        {
            LogHeartbeatFailed(logger, e);
        }
    }

    /// <summary>Takes the search, waiting while another run holds it; false when it is already finished.</summary>
    private async Task<bool> ClaimAsync(string searchId, string owner, CancellationToken cancellationToken)
    {
        var waited = false;
        while (true)
        {
            switch (searches.TryClaim(searchId, owner, Lease))
            {
                case ClaimOutcome.Claimed:
                    return true;
                case ClaimOutcome.Final:
                    LogAlreadyFinished(logger, searchId);
                    return false;
                default:
                    if (!waited)
                    {
                        LogWaitingForOtherRun(logger, searchId);
                        waited = true;
                    }

                    await Task.Delay(ClaimPollInterval, cancellationToken).ConfigureAwait(false);
                    break;
            }
        }
    }

    private void Beat(ProgressReporter progress)
    {
        try
        {
            progress.Heartbeat();
        }
        catch (Exception e) when (e is System.Data.Common.DbException or ObjectDisposedException)
        {
            LogHeartbeatFailed(logger, e);
        }
    }

    [LoggerMessage(EventId = 3000, Level = LogLevel.Information, Message = "Search {SearchId} started (attempt {Attempt})")]
    private static partial void LogStarted(ILogger logger, string searchId, int attempt);

    [LoggerMessage(EventId = 3001, Level = LogLevel.Information, Message = "Search {SearchId} succeeded (feasible: {Feasible}): {Summary}")]
    private static partial void LogSucceeded(ILogger logger, string searchId, bool feasible, string summary);

    [LoggerMessage(EventId = 3002, Level = LogLevel.Warning, Message = "Search {SearchId} finished, but it was canceled or taken over meanwhile; its result was not stored")]
    private static partial void LogResultDiscarded(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3003, Level = LogLevel.Information, Message = "Search {SearchId} stopped: it was canceled")]
    private static partial void LogCanceled(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3004, Level = LogLevel.Warning, Message = "Search {SearchId} interrupted by shutdown; it will resume from its stored trials")]
    private static partial void LogInterrupted(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3005, Level = LogLevel.Warning, Message = "Search {SearchId} failed: {Code}: {Reason}")]
    private static partial void LogEngineRefused(ILogger logger, string searchId, string code, string reason);

    [LoggerMessage(EventId = 3006, Level = LogLevel.Error, Message = "Search {SearchId} failed (failure {Failures} of the {MaxAttempts} allowed)")]
    private static partial void LogAttemptFailed(ILogger logger, Exception exception, string searchId, int failures, int maxAttempts);

    [LoggerMessage(EventId = 3010, Level = LogLevel.Error, Message = "Search {SearchId} interrupted: the data folder cannot be written; it will be queued again, uncounted, once it can")]
    private static partial void LogStorageFault(ILogger logger, Exception exception, string searchId);

    [LoggerMessage(EventId = 3007, Level = LogLevel.Information, Message = "Search {SearchId} is already finished; nothing to do")]
    private static partial void LogAlreadyFinished(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3008, Level = LogLevel.Information, Message = "Search {SearchId} is held by another run; waiting for it")]
    private static partial void LogWaitingForOtherRun(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3012, Level = LogLevel.Information, Message = "Search {SearchId} sweep: {SweepPlan}")]
    private static partial void LogSweepPlan(ILogger logger, string searchId, string sweepPlan);

    [LoggerMessage(EventId = 3011, Level = LogLevel.Information, Message = "Search {SearchId} reuses the sensitivity trials of {Count} earlier searches on the same model, dataset and settings: {EarlierIds}")]
    private static partial void LogReusing(ILogger logger, string searchId, int count, string earlierIds);

    [LoggerMessage(EventId = 3012, Level = LogLevel.Information, Message = "Search {SearchId}: its sweep is in parts that any worker takes; this job ends until the last part is done")]
    private static partial void LogDispatched(ILogger logger, string searchId);

    [LoggerMessage(EventId = 3009, Level = LogLevel.Warning, Message = "Could not renew a search lease")]
    private static partial void LogHeartbeatFailed(ILogger logger, Exception exception);
}
