using Bitbudget.Service.Auth;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// Runs before the web server and the job workers start: migrates the store, settles the API keys
/// (creating one on first start), removes staged blob files a crashed write left behind and re-queues
/// searches whose jobs were lost.
/// </summary>
internal sealed partial class StartupTasks(Database database, BlobStore blobs, ApiKeyRing keys, SearchRecovery recovery, ILogger<StartupTasks> logger) : IHostedService
{
    public Task StartAsync(CancellationToken cancellationToken)
    {
        var version = database.Migrate();
        LogStore(logger, database.Location, version);
        if (blobs.RemoveStaleStagedFiles(DateTimeOffset.UtcNow) is > 0 and var removed)
        {
            LogStaleStaged(logger, removed);
        }

        GC.KeepAlive(keys);
        recovery.Run();
        return Task.CompletedTask;
    }

    public Task StopAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    [LoggerMessage(EventId = 101, Level = LogLevel.Warning, Message = "Removed {Count} staged blob file(s) left behind by a crashed write")]
    private static partial void LogStaleStaged(ILogger logger, int count);

    [LoggerMessage(EventId = 100, Level = LogLevel.Information, Message = "Store {StorePath} at schema version {Version}")]
    private static partial void LogStore(ILogger logger, string storePath, int version);
}
