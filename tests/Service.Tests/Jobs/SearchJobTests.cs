using System.Text.RegularExpressions;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;
using Hangfire;
using Microsoft.Extensions.DependencyInjection;

namespace Bitbudget.Service.Tests.Jobs;

/// <summary>
/// Runs the job method directly against an API-only host (no Hangfire workers), so the tests decide when
/// and how often a search's job runs.
/// </summary>
public sealed class SearchJobTests : IDisposable
{
    private readonly ServiceFactory factory = new(workers: 0, configureKey: true);
    private readonly HttpClient client;

    public SearchJobTests() => client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task TwoConcurrentRunsOfOneSearchMeasureEachTrialOnceAndStoreOneResult()
    {
        var id = await QueueAsync("twice");
        var hold = factory.Engine.HoldRun("twice");

        var first = Job().RunAsync(id, CancellationToken.None);
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));
        var second = Job().RunAsync(id, CancellationToken.None);
        await Task.Delay(300);
        Assert.False(second.IsCompleted);
        hold.Release();
        await Task.WhenAll(first, second).WaitAsync(TimeSpan.FromSeconds(30));

        Assert.Equal(1, factory.Engine.Runs["twice"]);
        var measured = factory.Engine.Measured["twice"].ToList();
        Assert.Equal(20, measured.Count);
        Assert.Equal(measured.Count, measured.Distinct().Count());
        Assert.Equal(20, Trials(id).Page(0, 100).Total);
        Assert.Equal(1, Store().CountResults(id));
        Assert.Equal("succeeded", Store().Find(id)!.State);
    }

    [Fact]
    public async Task ARunAfterSuccessDoesNothing()
    {
        var id = await QueueAsync("after");
        await Job().RunAsync(id, CancellationToken.None);
        var result = Store().FindResult(id);

        await Job().RunAsync(id, CancellationToken.None);

        Assert.Equal(1, factory.Engine.Runs["after"]);
        Assert.Equal(result, Store().FindResult(id));
    }

    [Fact]
    public async Task ARestartedSearchSkipsTheTrialsItAlreadyStored()
    {
        var id = await QueueAsync("resume");
        var trials = Trials(id);
        var metrics = new MetricSet(0.01, 20, 1, 0, 1, null);
        trials.Save(new TrialRecord("reference", "reference", null, null, null, metrics, 1));
        trials.Save(new TrialRecord("sensitivity/conv1/2/Symmetric", "sensitivity", "conv1", 2, null, metrics, 1));
        trials.Save(new TrialRecord("sensitivity/conv1/3/Symmetric", "sensitivity", "conv1", 3, null, metrics, 1));

        await Job().RunAsync(id, CancellationToken.None);

        var measured = factory.Engine.Measured["resume"].ToList();
        Assert.Equal(17, measured.Count);
        Assert.DoesNotContain("sensitivity/conv1/2/Symmetric", measured);
        Assert.Equal(20, trials.Page(0, 100).Total);
        Assert.Equal(20, Store().FindResult(id)!.TrialCount);
    }

    [Fact]
    public async Task UnexpectedErrorsAreRetriedThenFailTheSearch()
    {
        var id = await QueueAsync("crash", FakeSearchEngine.Model("crash", options: "crash"));

        for (var attempt = 1; attempt < SearchJob.MaxAttempts; attempt++)
        {
            await Assert.ThrowsAsync<InvalidOperationException>(() => Job().RunAsync(id, CancellationToken.None));
            var retrying = Store().Find(id)!;
            Assert.Equal("running", retrying.State);
            Assert.Equal("search-crashed", retrying.ErrorCode);
            Assert.Contains($"failure {attempt} of the 3 allowed", retrying.ErrorMessage, StringComparison.Ordinal);
            Assert.Equal(attempt, retrying.Failures);
        }

        await Assert.ThrowsAsync<InvalidOperationException>(() => Job().RunAsync(id, CancellationToken.None));

        var failed = Store().Find(id)!;
        Assert.Equal("failed", failed.State);
        Assert.Contains("failed 3 times", failed.ErrorMessage, StringComparison.Ordinal);
        Assert.Contains("crashed on purpose", failed.ErrorMessage, StringComparison.Ordinal);
        Assert.Equal(3, factory.Engine.Runs["crash"]);
        // The double crashes after the reference and the 18 sweep trials; reruns measured none of them again.
        Assert.Equal(1 + 18, Trials(id).Page(0, 100).Total);
        Assert.Equal(1 + 18, factory.Engine.Measured["crash"].Count);
    }

    [Fact]
    public async Task RestartsAfterACrashDoNotUseUpTheRetryBudget()
    {
        var id = await QueueAsync("restarts", FakeSearchEngine.Model("restarts", options: "crash"));
        // Three kill -9 restarts: each run claimed the search, then died without a word; the next took over once the lease lapsed.
        for (var restart = 0; restart < 3; restart++)
        {
            Assert.Equal(ClaimOutcome.Claimed, Store().TryClaim(id, $"killed-{restart}", TimeSpan.FromMilliseconds(-1)));
        }

        await Assert.ThrowsAsync<InvalidOperationException>(() => Job().RunAsync(id, CancellationToken.None));

        // The first real failure of the search: retried, and the message counts failures, not runs.
        var retrying = Store().Find(id)!;
        Assert.Equal("running", retrying.State);
        Assert.Equal(4, retrying.Attempts);
        Assert.Equal(1, retrying.Failures);
        Assert.Contains("failure 1 of the 3 allowed", retrying.ErrorMessage, StringComparison.Ordinal);
    }

    [Fact]
    public async Task ASearchInterruptedByAFullDiskIsQueuedAgainUncountedAndThenSucceeds()
    {
        var id = await QueueAsync("disk-full", FakeSearchEngine.Model("disk-full", options: "disk-full-once"));
        var job = Store().Find(id)!.JobId!;
        MarkProcessing(job);

        await Assert.ThrowsAsync<Microsoft.Data.Sqlite.SqliteException>(() => Job().RunAsync(id, CancellationToken.None));

        var interrupted = Store().Find(id)!;
        Assert.Equal("running", interrupted.State);
        Assert.Equal(0, interrupted.Failures);
        // The queue could not record the retry either (same full disk), so the job is still "processing" with
        // nobody running it. Within the release grace recovery leaves it to the queue's retry ...
        var recovery = factory.Services.GetRequiredService<SearchRecovery>();
        Assert.Equal(0, recovery.Run());
        // ... and once the grace has passed (moved into the past here rather than waited for), it queues it again.
        ExecuteSql($"UPDATE searches SET lease_until = '{Clock.Format(DateTimeOffset.UtcNow.AddSeconds(-1))}' WHERE id = '{id}';");
        Assert.Equal(1, recovery.Run());
        Assert.Equal(0, recovery.Run());
        Assert.NotEqual(job, Store().Find(id)!.JobId);

        await Job().RunAsync(id, CancellationToken.None);
        Assert.Equal("succeeded", Store().Find(id)!.State);
        var measured = factory.Engine.Measured["disk-full"].ToList();
        Assert.Equal(measured.Count, measured.Distinct().Count());
    }

    [Fact]
    public async Task RecoveryLeavesASearchThisProcessIsRunningAlone()
    {
        var id = await QueueAsync("running-here");
        MarkProcessing(Store().Find(id)!.JobId!);
        var hold = factory.Engine.HoldRun("running-here");
        var run = Job().RunAsync(id, CancellationToken.None);
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));
        // A lease that looks lapsed (a slow disk delayed the renewal), while the run is alive in this process.
        ExecuteSql($"UPDATE searches SET lease_until = '{Clock.Format(DateTimeOffset.UtcNow.AddSeconds(-1))}' WHERE id = '{id}';");

        Assert.Equal(0, factory.Services.GetRequiredService<SearchRecovery>().Run());

        hold.Release();
        await run.WaitAsync(TimeSpan.FromSeconds(30));
        Assert.Equal("succeeded", Store().Find(id)!.State);
    }

    [Fact]
    public async Task ShutdownHandsTheSearchBackForTheNextRun()
    {
        var id = await QueueAsync("shutdown");
        var hold = factory.Engine.HoldRun("shutdown");
        using var shutdown = new CancellationTokenSource();

        var run = Job().RunAsync(id, shutdown.Token);
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));
        await shutdown.CancelAsync();
        await Assert.ThrowsAnyAsync<OperationCanceledException>(() => run.WaitAsync(TimeSpan.FromSeconds(30)));
        Assert.Equal("running", Store().Find(id)!.State);

        // The lease was released, so the next run starts at once and goes on from the stored trials.
        await Job().RunAsync(id, CancellationToken.None).WaitAsync(TimeSpan.FromSeconds(30));

        Assert.Equal("succeeded", Store().Find(id)!.State);
        var measured = factory.Engine.Measured["shutdown"].ToList();
        Assert.Equal(20, measured.Count);
        Assert.Equal(measured.Count, measured.Distinct().Count());
    }

    [Fact]
    public async Task ACancelWrittenByAnotherProcessStopsTheRunAtItsNextProgressReport()
    {
        var id = await QueueAsync("remote-cancel");
        var hold = factory.Engine.HoldRun("remote-cancel");
        var run = Job().RunAsync(id, CancellationToken.None);
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));

        // Straight to the store, as an API process elsewhere would: this process's cancel registry is not told.
        Assert.True(Store().Cancel(id));
        await Task.Delay(ProgressReporterMinInterval());
        hold.Release();
        await run.WaitAsync(TimeSpan.FromSeconds(30));

        Assert.Equal("canceled", Store().Find(id)!.State);
        Assert.Null(Store().FindResult(id));
        Assert.True(factory.Engine.Measured["remote-cancel"].Count < 20);
    }

    [Fact]
    public async Task SearchesWhoseJobIsGoneAreQueuedAgainAtStart()
    {
        var id = await QueueAsync("recover");
        var lostJob = Store().Find(id)!.JobId!;
        factory.Services.GetRequiredService<IBackgroundJobClient>().Delete(lostJob);
        Store().TryClaim(id, "crashed-process", TimeSpan.FromMilliseconds(-1));
        var recovery = factory.Services.GetRequiredService<SearchRecovery>();

        Assert.Equal(1, recovery.Run());
        Assert.Equal(0, recovery.Run());

        var requeued = Store().Find(id)!;
        Assert.NotEqual(lostJob, requeued.JobId);
        Assert.True(factory.Services.GetRequiredService<SearchQueue>().IsAlive(requeued.JobId!));
    }

    [Fact]
    public async Task ARunningSearchWhoseWorkerDiedIsQueuedAgainOnceItsLeaseLapses()
    {
        var id = await QueueAsync("orphan");
        var recovery = factory.Services.GetRequiredService<SearchRecovery>();
        var job = Store().Find(id)!.JobId!;
        MarkProcessing(job);

        Store().TryClaim(id, "worker", TimeSpan.FromMinutes(1));
        Assert.Equal(0, recovery.Run());

        // The same worker's last renewal, now in the past: it stopped renewing because it died.
        Assert.Equal(ClaimOutcome.Claimed, Store().TryClaim(id, "worker", TimeSpan.FromMilliseconds(-1)));
        Assert.Equal(1, recovery.Run());
        Assert.Equal(0, recovery.Run());
        Assert.NotEqual(job, Store().Find(id)!.JobId);

        await Job().RunAsync(id, CancellationToken.None);
        Assert.Equal("succeeded", Store().Find(id)!.State);
    }

    [Fact]
    public async Task JobLogLinesCarryTheSearchId()
    {
        var id = await QueueAsync("logged");

        await Job().RunAsync(id, CancellationToken.None);

        var logs = Directory.GetFiles(Path.Combine(factory.DataFolder, "logs"), "bitbudget-*.log");
        var text = string.Concat(logs.Select(ReadShared));
        Assert.Matches(new Regex($@"\[INF\] {id} Bitbudget\.Service\.Jobs\.SearchJob: Search {id} started"), text);
        Assert.Matches(new Regex($@"\[INF\] {id} Bitbudget\.Service\.Jobs\.SearchJob: Search {id} succeeded"), text);
    }

    public void Dispose()
    {
        client.Dispose();
        factory.Dispose();
    }

    private static string ReadShared(string path)
    {
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite);
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }

    private async Task<string> QueueAsync(string tag, byte[]? model = null)
    {
        var (modelId, datasetId) = await client.UploadAsync(tag, model);
        var search = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } });
        Assert.Equal("queued", search.GetProperty("state").GetString());
        return search.GetProperty("id").GetString()!;
    }

    /// <summary>Leaves the job "processing", as a worker does when its process dies mid-job or the queue cannot record what came next.</summary>
    private void MarkProcessing(string job)
    {
        using var connection = factory.Services.GetRequiredService<JobStorage>().GetConnection();
        using var transaction = connection.CreateWriteTransaction();
        transaction.SetJobState(job, new ProcessingMark());
        transaction.Commit();
    }

    private void ExecuteSql(string sql)
    {
        using var connection = factory.Services.GetRequiredService<Database>().Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        command.ExecuteNonQuery();
    }

    private static TimeSpan ProgressReporterMinInterval() => ProgressReporter.MinInterval + TimeSpan.FromMilliseconds(50);

    private SearchJob Job() => factory.Services.GetRequiredService<SearchJob>();

    private SearchStore Store() => factory.Services.GetRequiredService<SearchStore>();

    private TrialStore Trials(string id) => new(factory.Services.GetRequiredService<Database>(), id);

    private sealed class ProcessingMark : Hangfire.States.IState
    {
        public string Name => Hangfire.States.ProcessingState.StateName;

        public string Reason => "Worker died";

        public bool IsFinal => false;

        public bool IgnoreJobLoadException => false;

        public Dictionary<string, string> SerializeData() => new() { ["ServerId"] = "dead-server", ["WorkerId"] = "worker-1" };
    }
}
