using Bitbudget.Service.Hosting;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Jobs;

/// <summary>Runs <see cref="SearchRecovery"/> now and then, so a search whose worker died resumes without waiting for a restart.</summary>
internal sealed partial class RecoveryLoop(SearchRecovery recovery, IOptions<BitbudgetOptions> options, ILogger<RecoveryLoop> logger) : BackgroundService
{
    protected override async Task ExecuteAsync(CancellationToken stoppingToken)
    {
        using var timer = new PeriodicTimer(TimeSpan.FromSeconds(options.Value.RecoveryIntervalSeconds));
        try
        {
            while (await timer.WaitForNextTickAsync(stoppingToken).ConfigureAwait(false))
            {
                try
                {
                    recovery.Run();
                }
                catch (Exception e) when (e is System.Data.Common.DbException or InvalidOperationException)
                {
                    LogFailed(logger, e);
                }
            }
        }
        catch (OperationCanceledException) when (stoppingToken.IsCancellationRequested)
        {
            // The host is stopping. When it never finished starting (its address was taken), it is disposed without a
            // stop, and the host would log this cancellation as a crash of the loop, stack trace and all.
        }
    }

    [LoggerMessage(EventId = 3101, Level = LogLevel.Warning, Message = "Looking for searches to resume failed; trying again at the next interval")]
    private static partial void LogFailed(ILogger logger, Exception exception);
}
