using System.Globalization;
using System.Text;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;
using Microsoft.AspNetCore.Http.HttpResults;

namespace Bitbudget.Service.Api;

/// <summary>Health and metrics for whoever runs the service; neither needs an API key.</summary>
internal static partial class OperationsApi
{
    public static IEndpointRouteBuilder MapOperationsApi(this IEndpointRouteBuilder app)
    {
        app.MapGet("/healthz", Health).AllowAnonymous().WithTags("Operations").WithName("Health").WithSummary("Whether the store and the job queue answer, and the store takes a write").ProducesProblem(503);
        app.MapGet("/metrics", Metrics).AllowAnonymous().WithTags("Operations").WithName("Metrics").WithSummary("Prometheus text exposition: searches by state, trials, trial durations");
        return app;
    }

    public static Results<Ok<HealthResponse>, ProblemHttpResult> Health(Database database, SearchQueue queue, StoreProbe probe, ILoggerFactory loggers)
    {
        var store = Check(database.SchemaVersion);
        // A full or read-only disk still answers reads: only a write tells whether uploads and searches can be stored.
        var unwritable = store is null ? probe.Probe() : null;
        store ??= unwritable is null ? null : "unwritable: " + unwritable;
        var jobs = Check(queue.Ping);
        if (store is null && jobs is null)
        {
            return TypedResults.Ok(new HealthResponse("ok", "ok", "ok"));
        }

        LogUnhealthy(loggers.CreateLogger("Bitbudget.Service.Health"), store ?? "ok", jobs ?? "ok");
        return ProblemResults.Of(
            StatusCodes.Status503ServiceUnavailable,
            unwritable is not null ? ProblemTypes.StoreUnavailable : ProblemTypes.Unhealthy,
            $"Store: {store ?? "ok"}; queue: {jobs ?? "ok"}. Check the data folder's disk (free space) and permissions.",
            new Dictionary<string, object?> { ["store"] = store ?? "ok", ["queue"] = jobs ?? "ok" });
    }

    public static ContentHttpResult Metrics(SearchStore searches, TrialStatistics trials)
    {
        var text = new StringBuilder();
        text.AppendLine("# HELP bitbudget_searches Searches in the store by state.");
        text.AppendLine("# TYPE bitbudget_searches gauge");
        foreach (var (state, count) in searches.CountByState())
        {
            text.Append(CultureInfo.InvariantCulture, $"bitbudget_searches{{state=\"{state}\"}} {count}\n");
        }

        var (cumulative, total, sumSeconds) = trials.DurationHistogram();
        text.AppendLine("# HELP bitbudget_trials_total Trials measured and stored.");
        text.AppendLine("# TYPE bitbudget_trials_total counter");
        text.Append(CultureInfo.InvariantCulture, $"bitbudget_trials_total {total}\n");
        text.AppendLine("# HELP bitbudget_trial_duration_seconds Time one trial took.");
        text.AppendLine("# TYPE bitbudget_trial_duration_seconds histogram");
        for (var i = 0; i < TrialStatistics.BucketsSeconds.Count; i++)
        {
            text.Append(CultureInfo.InvariantCulture, $"bitbudget_trial_duration_seconds_bucket{{le=\"{TrialStatistics.BucketsSeconds[i]}\"}} {cumulative[i]}\n");
        }

        text.Append(CultureInfo.InvariantCulture, $"bitbudget_trial_duration_seconds_bucket{{le=\"+Inf\"}} {cumulative[^1]}\n");
        text.Append(CultureInfo.InvariantCulture, $"bitbudget_trial_duration_seconds_sum {sumSeconds}\n");
        text.Append(CultureInfo.InvariantCulture, $"bitbudget_trial_duration_seconds_count {total}\n");
        // Prometheus text exposition format 0.0.4 (prometheus.io/docs/instrumenting/exposition_formats).
        return TypedResults.Text(text.ToString(), "text/plain; version=0.0.4; charset=utf-8");
    }

    private static string? Check(Action probe)
    {
        try
        {
            probe();
            return null;
        }
        catch (Exception e) when (e is not OutOfMemoryException)
        {
            return "unreachable (" + e.GetType().Name + ")";
        }
    }

    private static string? Check(Func<int> probe) => Check(() => { probe(); });

    [LoggerMessage(EventId = 4000, Level = LogLevel.Error, Message = "Health check failed: store {Store}, queue {Queue}")]
    private static partial void LogUnhealthy(ILogger logger, string store, string queue);
}
